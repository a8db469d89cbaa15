"""Rewrite demos/covercrop_nitrate.csv from the seeded generator in famwise.scenarios.covercrop."""

import pathlib

from famwise.scenarios.covercrop import covercrop_trial

path = pathlib.Path(__file__).with_name("covercrop_nitrate.csv")
covercrop_trial().to_csv(path, index=False, lineterminator="\n")
print(f"wrote {path}")
