"""Run every benchmark in tests/bench (files bench_*.py), one after another.

Each benchmark is a script that measures its ratios side by side in one run
and prints a table; this runner only starts them and reports failures.
``python tests/bench/run_all.py NAME ...`` runs only the named ones.
"""

import pathlib
import subprocess
import sys

here = pathlib.Path(__file__).resolve().parent
wanted = set(sys.argv[1:])
failed = []
for script in sorted(here.glob("bench_*.py")):
    if wanted and script.stem not in wanted and script.stem[6:] not in wanted:
        continue
    print(f"\n=== {script.stem} ===", flush=True)
    if subprocess.call([sys.executable, str(script)]) != 0:
        failed.append(script.stem)
if failed:
    print(f"\nbenchmarks that failed or missed a target: {', '.join(failed)}")
    sys.exit(1)
