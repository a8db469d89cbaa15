"""Benchmark: how fast the command line starts, against a bare interpreter.

Target (issue 17): ``famwise --help``, ``famwise --version`` and ``famwise
procedures`` each take at most 0.25 s of wall time on this machine; the
ratio to ``python -c pass`` (the floor any Python program pays) is printed
for information.  Each command is run as a subprocess several times,
interleaved with the bare interpreter so that load from other processes hits
both alike; the median is reported.  Exits 1 if a target is missed.

What keeps it fast is that ``import famwise`` imports no heavy library
(pandas, scipy.stats, matplotlib, numba); ``tests/test_house.py`` guards that
on ``sys.modules``, which a timer cannot do reliably.
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import time

TARGET = 0.25
REPS = 9
here = os.path.dirname(os.path.abspath(__file__))
venv_bin = os.path.dirname(sys.executable)
famwise = shutil.which("famwise", path=venv_bin) or shutil.which("famwise")
CASES = {
    "famwise --help": [famwise, "--help"],
    "famwise --version": [famwise, "--version"],
    "famwise procedures": [famwise, "procedures"],
    "python -m famwise --help": [sys.executable, "-m", "famwise", "--help"],
}
BARE = [sys.executable, "-c", "pass"]


def _once(cmd) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    return time.perf_counter() - t0


def main() -> int:
    for cmd in CASES.values():          # warm the file cache and the byte-code
        _once(cmd)
    times = {name: [] for name in CASES}
    bare = []
    for _ in range(REPS):
        for name, cmd in CASES.items():
            times[name].append(_once(cmd))
            bare.append(_once(BARE))
    floor = statistics.median(bare)
    print(f"{'case':28s} {'median s':>9s} {'python -c pass':>15s} {'ratio':>6s} "
          f"{'target s':>9s} met")
    missed = False
    for name, ts in times.items():
        med = statistics.median(ts)
        ok = med <= TARGET
        missed |= not ok
        print(f"{name:28s} {med:9.3f} {floor:15.3f} {med / floor:6.1f} {TARGET:9.2f} "
              f"{'yes' if ok else 'NO'}")
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())
