"""Output files honour the user's umask, as a plain open() would.

The expectation is POSIX's (a new file gets mode 0666 & ~umask; see umask(2)
and open(2)), checked against a file Python itself creates under the same
umask.  Skipped where the platform has no POSIX permissions.
"""

import os
import stat
import sys

import numpy as np
import pandas as pd
import pytest

from famwise.report.output import write_atomic, write_files

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX permissions")


@pytest.fixture(params=[0o022, 0o077, 0o027])
def umask(request):
    old = os.umask(request.param)
    yield request.param
    os.umask(old)


def _mode(path):
    return stat.S_IMODE(os.stat(path).st_mode)


def _plain_mode(folder):
    probe = os.path.join(folder, "probe.txt")
    with open(probe, "w") as fh:               # the reference: Python's own open()
        fh.write("x")
    mode = _mode(probe)
    os.unlink(probe)
    return mode


def test_write_atomic_and_write_files_honour_the_umask(tmp_path, umask):
    expected = _plain_mode(tmp_path)
    assert expected == 0o666 & ~umask
    write_atomic(str(tmp_path / "one.txt"), "text")
    write_atomic(str(tmp_path / "two.bin"), b"bytes")
    written = write_files(str(tmp_path), {"a.csv": "x\n1\n", "b.json": "{}"})
    for path in [tmp_path / "one.txt", tmp_path / "two.bin", *written]:
        assert _mode(path) == expected, (path, oct(_mode(path)))
    assert not [p for p in os.listdir(tmp_path) if p.startswith(".famwise-")]


def test_saved_results_are_readable_by_others_under_022(tmp_path):
    from famwise import compare
    old = os.umask(0o022)
    try:
        rng = np.random.default_rng(4)
        frame = pd.DataFrame({"g": np.repeat(["A", "B", "C"], 6),
                              "y": rng.normal(size=18) + np.repeat([0, 1, 2], 6)})
        res = compare(frame, "y", "g", procedure="tukey-kramer")
        res.save(tmp_path / "out")
    finally:
        os.umask(old)
    files = sorted(os.listdir(tmp_path / "out"))
    assert "report.html" in files and "decision.json" in files
    for name in files:
        assert _mode(tmp_path / "out" / name) == 0o644, name
