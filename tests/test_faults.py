"""Faults: interruptions, output folders that cannot be written, a dying dask worker.

The contract (DESIGN.md, "Numerics and safety" and "Names we own"; common
practice, no source): outputs are written atomically and an interrupted run
leaves no partial output; bad output locations give one clear line and exit
code 2; a resampling run that loses a worker returns the complete result,
identical to a run that lost none, or raises a clear error, never a silent
partial result.

Tests run as root in CI, where ``chmod`` does not stop writes; the
unwritable-folder cases therefore use places no user can write to (a path
below a regular file) and a file-size limit (``RLIMIT_FSIZE``), which bind
root too.  The ``chmod 555`` case runs only when the tests do not run as root.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import warnings

import numpy as np
import pandas as pd
import pytest

from famwise.core.errors import FamwiseInputError
from famwise.report.output import prepare_folder, write_atomic, write_files

GOOD = ("mix,nitrate\n" + "".join(f"Rye,{10 + 0.25 * i}\n" for i in range(8))
        + "".join(f"Fallow,{12 + 0.5 * i}\n" for i in range(8))
        + "".join(f"Clover,{11 + 0.375 * i}\n" for i in range(8)))
RG = ["--response", "nitrate", "--group", "mix"]


def _env():
    env = dict(os.environ, CI="1")
    env.pop("FAMWISE_DEBUG", None)
    return env


def _famwise(args, **kw):
    return subprocess.run([sys.executable, "-m", "famwise", *args], capture_output=True,
                          text=True, timeout=300, env=_env(), **kw)


def _one_error_line(stderr):
    assert "Traceback" not in stderr, stderr
    errors = [ln for ln in stderr.splitlines() if ln.startswith("famwise: error: ")]
    assert len(errors) == 1, stderr
    return errors[0]


# --- (a) an interrupted run ---------------------------------------------------------

def _default_sigint():
    """In the child before exec: Ctrl-C back to its default action.  A shell
    that runs a job in the background (``cmd &`` without job control) gives
    it SIGINT ignored, the ignore is inherited, and Python then installs no
    KeyboardInterrupt handler; the test must not depend on how it was started."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def test_sigint_during_compare_leaves_no_output(tmp_path):
    """Ctrl-C while the resampling runs: exit 130, one line, and the output
    folder (created before the work, to fail early) holds nothing at all."""
    rng = np.random.default_rng(4)
    data = tmp_path / "long.csv"
    frame = pd.DataFrame({"mix": np.repeat([f"m{i}" for i in range(5)], 2000),
                          "nitrate": np.round(rng.normal(20, 3, 10000), 3)})
    frame.to_csv(data, index=False)
    out = tmp_path / "results"
    proc = subprocess.Popen(
        [sys.executable, "-m", "famwise", "compare", str(data), *RG, "-p",
         "permutation-maxt", "--resamples", "5000000", "--seed", "1", "--no-crosscheck",
         "--jobs", "2", "--out", str(out)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env(),
        preexec_fn=_default_sigint)
    try:
        deadline = time.monotonic() + 120
        while not out.exists():                # the folder is made before the work
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline
            time.sleep(0.05)
        time.sleep(2.0)                        # well into the five million resamples
        assert proc.poll() is None
        proc.send_signal(signal.SIGINT)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    assert "famwise: interrupted; nothing was written" in stderr
    assert not stdout.strip()
    assert os.listdir(out) == []               # no result files, no temporary files


def test_interrupted_file_set_leaves_the_folder_as_it_was(tmp_path, monkeypatch):
    """``write_files`` puts a set of files in place all together: an
    interruption while writing the fourth file leaves no file of the set and
    no temporary file; with ``force`` the previous set is left intact."""
    texts = {f"f{i}.txt": f"new {i}\n" * 1000 for i in range(6)}
    real_fdopen = os.fdopen
    opened = []

    def interrupting_fdopen(fd, *args, **kwargs):
        opened.append(fd)
        if len(opened) == 4:
            os.close(fd)
            raise KeyboardInterrupt
        return real_fdopen(fd, *args, **kwargs)

    monkeypatch.setattr("famwise.report.output.os.fdopen", interrupting_fdopen)
    with pytest.raises(KeyboardInterrupt):
        write_files(str(tmp_path), texts)
    assert os.listdir(tmp_path) == []
    # An older set is kept when the new one is interrupted, even mid-rename.
    monkeypatch.undo()
    write_files(str(tmp_path), {n: "old\n" for n in texts})
    real_replace = os.replace
    renames = []

    def interrupting_replace(src, dst):
        renames.append(dst)
        if sum(1 for d in renames if not d.endswith(".old")) == 3:
            raise KeyboardInterrupt
        return real_replace(src, dst)

    monkeypatch.setattr("famwise.report.output.os.replace", interrupting_replace)
    with pytest.raises(KeyboardInterrupt):
        write_files(str(tmp_path), texts)
    monkeypatch.undo()
    assert sorted(os.listdir(tmp_path)) == sorted(texts)
    assert all((tmp_path / n).read_text() == "old\n" for n in texts)
    # And the normal case replaces every file.
    write_files(str(tmp_path), texts)
    assert all((tmp_path / n).read_text() == t for n, t in texts.items())
    assert sorted(os.listdir(tmp_path)) == sorted(texts)


def test_interrupted_single_write_leaves_the_old_file(tmp_path, monkeypatch):
    path = tmp_path / "comparisons.csv"
    path.write_text("old\n")

    def boom(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr("famwise.report.output.os.fsync", boom)
    with pytest.raises(KeyboardInterrupt):
        write_atomic(str(path), "new\n")
    assert os.listdir(tmp_path) == ["comparisons.csv"]
    assert path.read_text() == "old\n"


# --- (b) output folders that cannot be written ----------------------------------------

def test_output_below_a_regular_file_is_a_clear_error(tmp_path):
    data = tmp_path / "trial.csv"
    data.write_text(GOOD)
    proc = _famwise(["compare", str(data), *RG, "--out", str(data / "results")])
    assert proc.returncode == 2
    line = _one_error_line(proc.stderr)
    assert "cannot create output folder" in line and "Not a directory" in line
    assert data.read_text() == GOOD


def test_output_folder_that_is_a_file_is_refused_untouched(tmp_path):
    target = tmp_path / "results"
    target.write_text("keep me")
    with pytest.raises(FamwiseInputError, match="exists and is not a folder"):
        prepare_folder(str(target), ["comparisons.csv"])
    assert target.read_text() == "keep me"


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="root writes into chmod 555 folders; covered by the cases above")
def test_read_only_folder_is_a_clear_error(tmp_path):
    data = tmp_path / "trial.csv"
    data.write_text(GOOD)
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        proc = _famwise(["compare", str(data), *RG, "--out", str(folder)])
    finally:
        folder.chmod(0o755)
    assert proc.returncode == 2
    assert "is not writable" in _one_error_line(proc.stderr)
    assert os.listdir(folder) == []


def _limit_file_size(limit):
    def apply():
        import resource
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)   # EFBIG instead of a kill
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return apply


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX resource limits")
def test_write_failure_is_one_line_and_leaves_no_temporary_file(tmp_path):
    """A file-size limit (binding for root as for anyone) makes the report too
    big to write: one clear line naming the file, exit code 2, no temporary
    file left behind, and every result file present is complete."""
    data = tmp_path / "trial.csv"
    data.write_text(GOOD)
    out = tmp_path / "results"
    proc = subprocess.run(
        [sys.executable, "-m", "famwise", "compare", str(data), *RG, "-p", "tukey-kramer",
         "--no-crosscheck", "--seed", "1", "--out", str(out), "--quiet"],
        capture_output=True, text=True, timeout=300, env=_env(),
        preexec_fn=_limit_file_size(20_000))
    assert proc.returncode == 2, proc.stderr
    line = _one_error_line(proc.stderr)
    assert "cannot write" in line and "File too large" in line, line
    left = os.listdir(out)
    assert not [n for n in left if n.startswith(".famwise-")], left
    assert "report.html" not in left                  # the one that did not fit
    for name in left:                                  # the others are whole files
        text = (out / name).read_text()
        if name.endswith(".json"):
            json.loads(text)
        elif name.endswith(".csv"):
            pd.read_csv(out / name)


def test_missing_parent_folders_are_created(tmp_path, capsys):
    """famwise creates the output folder and its missing parents."""
    from famwise.cli import main
    data = tmp_path / "trial.csv"
    data.write_text(GOOD)
    out = tmp_path / "a" / "b" / "c"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        code = main(["compare", str(data), *RG, "-p", "tukey-kramer", "--no-crosscheck",
                     "--seed", "1", "--out", str(out), "--quiet"])
    assert code == 0, capsys.readouterr().err
    from famwise.report.files import OUTPUT_FILES
    assert sorted(os.listdir(out)) == sorted(OUTPUT_FILES)
    # A second run refuses to overwrite without --force and changes nothing.
    before = {n: (out / n).read_bytes() for n in OUTPUT_FILES}
    code = main(["compare", str(data), *RG, "-p", "tukey-kramer", "--no-crosscheck",
                 "--seed", "1", "--out", str(out), "--quiet"])
    assert code == 2
    assert "pass --force" in capsys.readouterr().err
    assert {n: (out / n).read_bytes() for n in OUTPUT_FILES} == before


# --- (d) a dask worker killed mid-run ----------------------------------------------------

@pytest.fixture(scope="module")
def cluster_client():
    distributed = pytest.importorskip("dask.distributed")
    import logging
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                       dashboard_address=None, processes=True,
                                       silence_logs=logging.CRITICAL)
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


def _numeric(table):
    return table.drop(columns=["procedure"]).reset_index(drop=True)


def test_killed_dask_worker_gives_the_complete_result_or_an_error(cluster_client,
                                                                 monkeypatch):
    """Kill one of the two worker processes after a few chunks have come back:
    the run either completes with exactly the result of an undisturbed
    threaded run (the lost chunks are recomputed from their own seeds) or
    raises; it never returns a partial or different table."""
    from famwise.core.families import all_pairs
    from famwise.core.layout import Layout
    from famwise.resample import engine, permutation_maxt

    rng = np.random.default_rng(21)
    layout = Layout.from_groups([rng.normal(0, s, 600) for s in (1.0, 1.5, 2.0, 1.0)])
    family = all_pairs(layout.labels)
    options = dict(resamples=6000, seed=31, chunk_size=100)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = permutation_maxt(layout, family, **options)
    pids = cluster_client.run(os.getpid)
    victim = sorted(pids.values())[0]
    collected, killed = [], []
    real_update = engine._Progress.update

    def update(self, n):
        collected.append(n)
        if len(collected) == 5 and not killed:
            os.kill(victim, signal.SIGKILL)
            killed.append(time.monotonic())
        return real_update(self, n)

    monkeypatch.setattr(engine._Progress, "update", update)
    outcome = None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            got = permutation_maxt(layout, family, backend="dask", scheduler=cluster_client,
                                   n_jobs=2, **options)
        except Exception as exc:           # a clear error is acceptable ...
            outcome = exc
    print(f"\nkilled worker {victim}; outcome: {'complete' if outcome is None else repr(outcome)}")
    assert killed, "the worker was not killed during the run"
    assert len(collected) >= 5
    if outcome is None:                     # ... a partial or different result is not
        assert sum(collected) == options["resamples"]
        pd.testing.assert_frame_equal(_numeric(got), _numeric(reference), check_exact=True)
        assert got.attrs["resampling"]["resamples"] == options["resamples"]
    else:
        assert str(outcome) or type(outcome).__name__
    # The cluster recovers: the nanny restarts the worker and the next run is exact.
    deadline = time.monotonic() + 60
    while len(cluster_client.scheduler_info()["workers"]) < 2 and time.monotonic() < deadline:
        time.sleep(0.2)
    monkeypatch.undo()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        again = permutation_maxt(layout, family, backend="dask", scheduler=cluster_client,
                                 n_jobs=2, **options)
    pd.testing.assert_frame_equal(_numeric(again), _numeric(reference), check_exact=True)
