"""Rewrite demos/water_quality.csv from the seeded generator in famwise.scenarios.water."""

import pathlib

from famwise.scenarios.water import water_survey

path = pathlib.Path(__file__).with_name("water_quality.csv")
water_survey().to_csv(path, index=False, lineterminator="\n")
print(f"wrote {path}")
