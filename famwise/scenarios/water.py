"""The second invented demo: a river water-quality survey at seven stations.

A catchment team sampled seven stations along an invented river and its
tributaries over three campaigns and sent the bottles to a laboratory for
twelve analytes.  The data are invented and seeded; none of it describes a
real river, station or laboratory.  They carry the mess of real monitoring
records:

* concentrations that are skewed (log-normal sample-to-sample variation,
  spread growing with the level), E. coli counts most of all;
* results below the laboratory's detection limit written with the limit,
  ``"<0.5"`` (lead most often, a few for ammonium, copper, phosphate,
  zinc); for lead the laboratory's new instrument lowered the limit from
  0.5 to 0.2 ug/L for the last campaign, so lead has two limits;
* a station reached only three times (``Greystane Reach``: a landslip closed
  the track), and two of its three lead results are non-detects;
* a few empty cells (a broken bottle, a meter that failed);
* stations below the treatment works' outfall carry more nutrients, salts
  and bacteria and less dissolved oxygen; other analytes do not differ.

``python demos/generate_water.py`` rewrites ``demos/water_quality.csv``
from :func:`water_survey`; a test checks that the two agree.  ``make
demo-batch`` runs ``famwise batch`` on it.

This is environmental-compliance territory: the demo shows the mechanics
only.  Real compliance work must follow the applicable regulations and
methods (for non-detects above all) and have a qualified statistician
review it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["STATIONS", "ANALYTES", "water_survey", "WATER_SEED", "WATER_GROUP"]

WATER_SEED = 20260417
WATER_GROUP = "station"

#: station -> (samples, load factor: 1 = upstream background)
STATIONS = {
    "Alder Ford": (12, 1.0),
    "Brennock Weir": (11, 1.1),
    "Cold Spring Outfall": (10, 2.6),
    "Dunmere Bridge": (12, 1.9),
    "Elvet Meadows": (9, 1.4),
    "Fallowby Mill": (11, 1.2),
    "Greystane Reach": (3, 1.0),
}

#: analyte column -> (typical upstream level, sdlog, detection limit or None,
#: how strongly the level follows the station's load factor, decimals)
ANALYTES = {
    "nitrate_mg_N_per_L": (1.8, 0.35, 0.05, 1.0, 2),
    "phosphate_mg_P_per_L": (0.04, 0.55, 0.01, 1.2, 3),
    "ammonium_mg_N_per_L": (0.05, 0.7, 0.02, 1.3, 3),
    "chloride_mg_per_L": (18.0, 0.25, None, 0.6, 1),
    "sulfate_mg_per_L": (22.0, 0.3, None, 0.0, 1),
    "zinc_ug_per_L": (9.0, 0.6, 2.0, 0.3, 1),
    "copper_ug_per_L": (2.2, 0.5, 1.0, 0.2, 1),
    "lead_ug_per_L": (0.6, 0.8, 0.5, 0.0, 2),
    "e_coli_MPN_per_100mL": (150.0, 1.1, None, 1.6, 0),
    "turbidity_NTU": (4.0, 0.6, None, 0.4, 1),
    "dissolved_oxygen_mg_per_L": (10.2, 0.06, None, -0.25, 1),
    "conductivity_uS_per_cm": (310.0, 0.15, None, 0.45, 0),
}

_CAMPAIGNS = ("2024 spring", "2024 autumn", "2025 spring")


def water_survey(seed: int = WATER_SEED) -> pd.DataFrame:
    """Return the invented water-quality survey (one row per sample).

    Columns: ``sample_id``, ``station``, ``campaign``, ``sampled_on`` (ISO
    date), then one column per analyte of :data:`ANALYTES` (numbers as text,
    ``"<L"`` with the limit L below the detection limit, empty where no
    result exists).
    """
    rng = np.random.default_rng(seed)
    rows = []
    number = 0
    for station, (n, load) in STATIONS.items():
        for i in range(n):
            number += 1
            campaign = _CAMPAIGNS[i % len(_CAMPAIGNS)]
            year = campaign[:4]
            month = 4 if "spring" in campaign else 10
            day = 1 + int(rng.integers(0, 28))
            row = {"sample_id": f"WQ-{number:04d}", "station": station,
                   "campaign": campaign, "sampled_on": f"{year}-{month:02d}-{day:02d}"}
            for name, (level, sdlog, dl, power, decimals) in ANALYTES.items():
                mean = level * load ** power
                # Log-normal around the station's mean: median mean*exp(-s^2/2).
                x = mean * rng.lognormal(-sdlog ** 2 / 2, sdlog)
                if name.startswith("e_coli"):
                    row[name] = str(int(rng.poisson(x)))    # most probable number, a count
                elif dl is not None and x < _limit(name, dl, campaign):
                    row[name] = f"<{_limit(name, dl, campaign):g}"
                else:
                    row[name] = f"{x:.{decimals}f}"
            rows.append(row)
    frame = pd.DataFrame(rows)
    # Gaps of real records, placed by hand.
    frame.loc[5, "turbidity_NTU"] = ""                 # meter failed in the field
    frame.loc[27, "nitrate_mg_N_per_L"] = ""           # bottle broken in transit
    frame.loc[27, "phosphate_mg_P_per_L"] = ""
    frame.loc[44, "dissolved_oxygen_mg_per_L"] = ""    # probe not calibrated
    grey = frame.index[frame["station"] == "Greystane Reach"]
    for i in grey[1:3]:                                # two of its three below the limit
        frame.loc[i, "lead_ug_per_L"] = (
            f"<{_limit('lead_ug_per_L', 0.5, frame.loc[i, 'campaign']):g}")
    return frame


def _limit(name: str, dl: float, campaign: str) -> float:
    """The laboratory's detection limit for ``name`` in ``campaign``."""
    if name == "lead_ug_per_L" and campaign == "2025 spring":
        return 0.2                                     # the new instrument
    return dl
