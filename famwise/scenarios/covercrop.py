"""The invented demo scenario: a cover-crop field trial and residual soil nitrate.

Six cover-crop mixes were sown on field plots in four blocks laid across a
slope; after the winter, residual soil nitrate (mg/kg, 0-30 cm) was measured
on each plot.  The blocks differ (the upper block, on lighter soil, keeps
about 14 mg/kg more nitrate than the lowest, which drains into the ditch), so
the analysis that follows the layout compares the mixes within blocks
(``--block block``).  The data are invented and seeded.  They carry the mess
of a real trial:

* unequal plot counts (4 to 12 usable per mix), because a low corner of the
  field flooded and those plots were not sampled (their rows are kept, with
  an empty nitrate cell and a note);
* spread that grows with the mean (log-normal plot-to-plot variation), the
  smallest mix carrying a large spread;
* two outliers: a plot beside a manure heap and a decimal slip at entry;
* three cells below the laboratory's detection limit written ``n.d.``;
* one label typed in lower case (``cereal rye``).

``python demos/generate.py`` rewrites ``demos/covercrop_nitrate.csv`` from
:func:`covercrop_trial`; a test checks that the two agree.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["MIXES", "BLOCK_EFFECTS", "covercrop_trial", "DEMO_SEED", "DEMO_RESPONSE",
           "DEMO_GROUP", "DEMO_REFERENCE", "DEMO_BLOCK"]

DEMO_SEED = 20261201
DEMO_RESPONSE = "nitrate_mg_kg"
DEMO_GROUP = "mix"
#: The laboratory's detection limit for nitrate, mg/kg (the "n.d." cells).
DETECTION_LIMIT = 1.0
DEMO_REFERENCE = "Bare fallow"

DEMO_BLOCK = "block"

#: block -> its effect on residual nitrate (mg/kg), upper slope first
BLOCK_EFFECTS = {1: 7.0, 2: 2.5, 3: -2.5, 4: -7.0}

#: mix -> (plots sown, typical nitrate mg/kg, plots lost to flooding)
MIXES = {
    "Bare fallow": (12, 24.0, 0),
    "Cereal rye": (11, 9.0, 0),
    "Rye + hairy vetch": (8, 13.0, 0),
    "Oat / radish": (7, 11.0, 1),
    "Crimson clover": (6, 18.0, 2),
    "Six-species blend": (9, 10.0, 0),
}


def covercrop_trial(seed: int = DEMO_SEED) -> pd.DataFrame:
    """Return the invented cover-crop trial as a DataFrame (one row per plot)."""
    rng = np.random.default_rng(seed)
    rows = []
    plot = 0
    for mix, (sown, typical, flooded) in MIXES.items():
        # Log-normal plot variation: SD proportional to the mean (CV about 30%),
        # larger on the clover plots, which lie on the uneven low ground.
        sdlog = 0.55 if mix == "Crimson clover" else 0.3
        values = typical * rng.lognormal(-sdlog ** 2 / 2, sdlog, size=sown)
        lost = set(rng.choice(sown, size=flooded, replace=False).tolist())
        for i in range(sown):
            plot += 1
            block = 1 + (plot - 1) % 4
            cell, note = f"{max(values[i] + BLOCK_EFFECTS[block], 1.5):.1f}", ""
            if i in lost:
                cell, note = "", "flooded, not sampled"
            rows.append([f"P{plot:02d}", block, mix, cell, note])
    frame = pd.DataFrame(rows, columns=["plot", "block", DEMO_GROUP, DEMO_RESPONSE, "note"])
    # The mess of real records, placed by hand so the walk-through can point at it.
    rye = frame.index[frame[DEMO_GROUP] == "Cereal rye"]
    frame.loc[rye[2], DEMO_RESPONSE] = "n.d."
    frame.loc[rye[2], "note"] = "below detection limit (1.0 mg/kg)"
    frame.loc[rye[7], DEMO_RESPONSE] = "n.d."
    frame.loc[rye[7], "note"] = "below detection limit (1.0 mg/kg)"
    frame.loc[rye[5], DEMO_RESPONSE] = "41.7"
    frame.loc[rye[5], "note"] = "beside the manure heap"
    frame.loc[rye[9], DEMO_GROUP] = "cereal rye"
    blend = frame.index[frame[DEMO_GROUP] == "Six-species blend"]
    frame.loc[blend[4], DEMO_RESPONSE] = "n.d."
    frame.loc[blend[4], "note"] = "below detection limit (1.0 mg/kg)"
    oat = frame.index[(frame[DEMO_GROUP] == "Oat / radish") & (frame[DEMO_RESPONSE] != "")]
    value = float(frame.loc[oat[3], DEMO_RESPONSE])
    frame.loc[oat[3], DEMO_RESPONSE] = f"{value * 10:.0f}"
    frame.loc[oat[3], "note"] = "entered without the decimal point?"
    return frame


#: The next season's plan: the smallest difference in residual nitrate that matters to the
#: trial's agronomists (mg/kg), and the plot counts per mix it compares.
PLAN_MARGIN = 5.0
PLAN_SIZES = (4, 6, 8, 10, 12, 16, 20)
PLAN_REPLICATES = 1000

#: Rows the walk-through sets aside after checking the records: the plot beside
#: the manure heap (row 19) and the value entered without its decimal point (row 37).
REVIEWED_EXCLUSIONS = (19, 37)


def run_demo(folder: str = "out/demo", force: bool = False) -> tuple[str, str]:
    """Run famwise on the trial as recorded, after the review, and within blocks.

    Writes the data and every result file to ``folder`` (the trial as
    recorded), to ``folder/after-review`` (rows 19 and 37 excluded) and to
    ``folder/blocked`` (the reviewed data under the model mix + block), then
    plans the next season from the reviewed trial (power to find a
    ``PLAN_MARGIN`` mg/kg difference between bare fallow and cereal rye, for
    ``PLAN_SIZES`` plots per mix) and writes the power report beside the
    reviewed comparison report; returns the text to print and the folder.
    """
    import os

    from ..api import compare
    from ..report.output import prepare_folder, write_atomic
    from ..report.files import OUTPUT_FILES
    from ..report.plan_files import PLAN_FILES
    from ..planning.plan import plan

    data_name = "covercrop_nitrate.csv"
    review = os.path.join(folder, "after-review")
    blocked = os.path.join(folder, "blocked")
    prepare_folder(folder, OUTPUT_FILES + (data_name,), force=force)
    prepare_folder(review, OUTPUT_FILES + PLAN_FILES, force=force)
    prepare_folder(blocked, OUTPUT_FILES, force=force)
    path = os.path.join(folder, data_name)
    write_atomic(path, covercrop_trial().to_csv(index=False, lineterminator="\n"))
    # The laboratory's detection limit (1.0 mg/kg, in the notes) gives the
    # "n.d." cells their limit: they are kept as values below it.
    options = dict(merge_spellings=True, seed=DEMO_SEED, resamples=9999,
                   detection_limit=DETECTION_LIMIT)
    first = compare(path, DEMO_RESPONSE, DEMO_GROUP, **options,
                    command=f"famwise compare {path} --response {DEMO_RESPONSE} "
                            f"--group {DEMO_GROUP} --merge-spellings --seed {DEMO_SEED} "
                            f"--detection-limit {DETECTION_LIMIT:g}")
    first.save(folder, force=force)
    rows = ",".join(map(str, REVIEWED_EXCLUSIONS))
    second = compare(path, DEMO_RESPONSE, DEMO_GROUP, **options,
                     exclude_rows=REVIEWED_EXCLUSIONS,
                     command=f"famwise compare {path} --response {DEMO_RESPONSE} "
                             f"--group {DEMO_GROUP} --merge-spellings --seed {DEMO_SEED} "
                             f"--detection-limit {DETECTION_LIMIT:g} --exclude-rows {rows}")
    second.save(review, force=force)
    sizes = ",".join(map(str, PLAN_SIZES))
    # Planning needs the spreads of measured values: the three non-detects are
    # set aside for the plan only (they sit below 1.0 mg/kg, under every other value).
    season = plan(path, DEMO_RESPONSE, DEMO_GROUP, merge_spellings=True,
                  exclude_rows=REVIEWED_EXCLUSIONS, margin=PLAN_MARGIN, n=list(PLAN_SIZES),
                  replicates=PLAN_REPLICATES, seed=DEMO_SEED, nondetects="drop")
    season.save(review, force=force)
    # The model's procedures compare means, which need measured values: the
    # blocked analysis sets the three non-detects aside (the record says so).
    third = compare(path, DEMO_RESPONSE, DEMO_GROUP, merge_spellings=True, seed=DEMO_SEED,
                    resamples=9999, exclude_rows=REVIEWED_EXCLUSIONS, block=DEMO_BLOCK,
                    nondetects="drop",
                    command=f"famwise compare {path} --response {DEMO_RESPONSE} "
                            f"--group {DEMO_GROUP} --block {DEMO_BLOCK} --merge-spellings "
                            f"--seed {DEMO_SEED} --exclude-rows {rows} --nondetects drop")
    third.save(blocked, force=force)
    text = "\n".join([
        "=== The trial as recorded ===", first.summary(), "",
        f"=== After checking rows {rows} against the field and lab records ===",
        "Row 19 is the plot beside the manure heap and row 37 a value typed without its",
        f"decimal point; both are excluded (--exclude-rows {rows}) and the ledger says so.",
        "", second.summary(), "",
        "=== The same, comparing the mixes within blocks (--block block) ===",
        "The plots were laid out in four blocks across the slope; the model mix + block",
        "takes the block differences out of the error before the mixes are compared.",
        "", third.summary(), "",
        f"=== Planning the next season: a {PLAN_MARGIN:g} mg/kg difference, {sizes} plots "
        f"per mix ===",
        f"famwise plan {path} -r {DEMO_RESPONSE} -g {DEMO_GROUP} --merge-spellings "
        f"--nondetects drop --exclude-rows {rows} --margin {PLAN_MARGIN:g} --n {sizes} "
        f"--replicates {PLAN_REPLICATES} --seed {DEMO_SEED}", "",
        season.summary()])
    return text, folder
