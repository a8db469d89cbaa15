"""The resampling engine: chunks, seeds, parallel dispatch and progress.

A run of B resamples is cut into fixed-size chunks.  Chunk ``i`` draws its
random numbers from the ``i``-th child of the root
:class:`numpy.random.SeedSequence` (the child a fresh root's
``spawn()`` would give, rebuilt from the root's entropy and the spawn key
``(..., i)``), so what a chunk returns depends on the data, the root seed,
``i`` and the chunk's size only, never on ``n_jobs``, the backend or which
worker ran it.  A chunk returns its max statistics and its exceedance
counts (:mod:`famwise.resample.kernels`); memory is bounded by the chunk
size and the data, never B x N.

Backends (joblib): ``"threads"`` (numba kernels release the GIL, so threads
run in parallel without copying the data), ``"processes"`` (loky) and
``"dask"`` (joblib's dask backend on a ``dask.distributed`` cluster, given
as a ``Client`` or a scheduler address, or the current default client).
``n_jobs`` has joblib's meaning.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from contextlib import ExitStack
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..core.errors import FamwiseInputError
from . import kernels, score_kernels
from .dask_client import dask_session

__all__ = ["BACKENDS", "ResamplingProblem", "ChunkResult", "ResamplingRun",
           "as_seed_sequence", "chunk_seed", "chunk_sizes", "default_chunk_size",
           "run_resamples", "run_tasks", "want_progress", "Progress"]

BACKENDS = ("threads", "processes", "dask")

# Rough cost of one element-resample (seconds), for the progress decision.
_SECONDS_PER_ELEMENT = 2.5e-9
_PROGRESS_AFTER = 2.0          # seconds of estimated run time


@dataclass(frozen=True)
class ResamplingProblem:
    """Everything a chunk kernel needs about one data set and family.

    ``kernel`` names a function of :mod:`famwise.resample.kernels` or
    :mod:`famwise.resample.score_kernels` (or ``"module.function"`` of
    another module of this package);
    ``args`` are its leading arguments (data, family, thresholds), to which
    the engine appends ``stepdown, size, rng_state``.
    """

    kernel: str
    args: tuple = field(repr=False)
    n_elements: int
    m: int


@dataclass(frozen=True)
class ChunkResult:
    """What one chunk of resamples returns."""

    size: int
    maxima: np.ndarray = field(repr=False)          # (size,)
    hits_marginal: np.ndarray = field(repr=False)   # (m,)
    hits_stepdown: np.ndarray = field(repr=False)   # (m,), by rank


@dataclass(frozen=True)
class ResamplingRun:
    """The raw result of a resampling run.

    Attributes
    ----------
    resamples : int
        B, the number of resamples.
    seed : int (or list of int)
        Entropy of the root SeedSequence (with ``spawn_key``, enough to
        repeat the run exactly).
    spawn_key : tuple of int
    chunk_size, n_chunks : int
    backend : str
    n_jobs : int or None
        As given (joblib's meaning).
    stepdown : bool
        Whether step-down counts were accumulated.
    seconds : float
        Wall time of the resampling.
    maxima : ndarray, shape (B,)
        The max statistic of every resample, in chunk order.
    hits_marginal, hits_stepdown : ndarray of int64, shape (m,)
        Summed exceedance counts (step-down counts by rank).
    chunks : tuple of ChunkResult
        Per-chunk results (reused when ``resamples="auto"`` grows B).
    """

    resamples: int
    seed: object
    spawn_key: tuple
    chunk_size: int
    n_chunks: int
    backend: str
    n_jobs: int | None
    stepdown: bool
    seconds: float
    maxima: np.ndarray = field(repr=False)
    hits_marginal: np.ndarray = field(repr=False)
    hits_stepdown: np.ndarray = field(repr=False)
    chunks: tuple = field(repr=False, default=())

    def hits_single(self, thr: np.ndarray) -> np.ndarray:
        """Return, per comparison, how many resample maxima reach ``thr``."""
        srt = np.sort(self.maxima)
        return self.resamples - np.searchsorted(srt, np.asarray(thr), side="left")

    def critical_value(self, alpha: float) -> float:
        """Return the (1 - alpha) quantile of the max statistic.

        The ``ceil((1 - alpha)(B + 1))``-th smallest of the B maxima (inf
        when B is too small), so that u > c exactly when the single-step
        p-value (1 + hits) / (1 + B) is at most alpha.
        """
        rank = int(np.ceil((1.0 - alpha) * (self.resamples + 1) - 1e-9))
        if rank > self.resamples:
            return float("inf")
        return float(np.partition(self.maxima, rank - 1)[rank - 1])


def as_seed_sequence(seed) -> np.random.SeedSequence:
    """Normalise ``seed`` (None, int >= 0, SeedSequence or Generator)."""
    if seed is None:
        return np.random.SeedSequence()
    if isinstance(seed, np.random.SeedSequence):
        return seed
    if isinstance(seed, np.random.Generator):
        return np.random.SeedSequence(int.from_bytes(seed.bytes(16), "little"))
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)):
        raise FamwiseInputError(
            f"seed must be None, a non-negative integer, a numpy SeedSequence or "
            f"Generator; got {seed!r}")
    if seed < 0:
        raise FamwiseInputError(f"seed must be a non-negative integer; got {seed}")
    return np.random.SeedSequence(int(seed))


def _entropy(root: np.random.SeedSequence):
    ent = root.entropy
    return int(ent) if np.ndim(ent) == 0 else [int(x) for x in np.ravel(ent)]


def chunk_seed(root: np.random.SeedSequence, index: int) -> np.random.SeedSequence:
    """Return the ``index``-th spawned child of ``root`` (without spawning)."""
    return np.random.SeedSequence(root.entropy, spawn_key=tuple(root.spawn_key) + (index,),
                                  pool_size=root.pool_size)


def default_chunk_size(n_elements: int) -> int:
    """Resamples per chunk: about 2**24 element-resamples, 16 to 1024."""
    return int(min(1024, max(16, (1 << 24) // max(int(n_elements), 1))))


def chunk_sizes(resamples: int, chunk_size: int) -> list[int]:
    """Split B into full chunks of ``chunk_size`` and one remainder."""
    full, rest = divmod(int(resamples), int(chunk_size))
    return [chunk_size] * full + ([rest] if rest else [])


def _kernel(name: str):
    """The kernel function ``name`` of :mod:`kernels` or :mod:`score_kernels`,
    or ``"module.name"`` of another module of this package (the model
    kernels)."""
    if "." in name:
        import importlib
        module, fn = name.split(".", 1)
        return getattr(importlib.import_module(f"{__package__}.{module}"), fn)
    return getattr(kernels, name, None) or getattr(score_kernels, name)


def _run_chunk(problem: ResamplingProblem, stepdown: bool, size: int,
               rng_state: np.ndarray) -> ChunkResult:
    fn = _kernel(problem.kernel)
    maxima, hm, hs = fn(*problem.args, stepdown, size, rng_state)
    return ChunkResult(size, maxima, hm, hs)


class _Progress:
    """A tqdm bar on stderr, or nothing."""

    def __init__(self, total: int, enabled: bool, unit: str = "resample",
                 desc: str = "resampling"):
        self.bar = None
        if enabled:
            from tqdm.auto import tqdm
            self.bar = tqdm(total=total, unit=unit, unit_scale=True,
                            file=sys.stderr, leave=False, desc=desc)

    def update(self, n: int):
        if self.bar is not None:
            self.bar.update(n)

    def close(self):
        if self.bar is not None:
            self.bar.close()


def want_progress(progress, estimate: float) -> bool:
    """Whether to show a bar: as asked, else on a terminal, outside CI, for long runs."""
    if progress is not None:
        return bool(progress)
    try:
        tty = sys.stderr.isatty()
    except (AttributeError, ValueError):
        tty = False
    return tty and not os.environ.get("CI") and estimate > _PROGRESS_AFTER


def run_tasks(fn: Callable, tasks, n_jobs=1, backend: str = "threads", scheduler=None,
              on_result: Callable | None = None) -> None:
    """Run ``fn(*args)`` for each ``(key, args)`` in ``tasks`` and call
    ``on_result(key, result)`` in task order.

    The one dispatcher of the resampling engine and of the simulations built
    on it (:mod:`famwise.diagnostics.simulate`): inline when ``n_jobs`` is 1
    with threads, else joblib with the backend as a hint (threads, loky
    processes) or joblib's dask backend on the session of
    :func:`famwise.resample.dask_client.dask_session`.  On an interrupt or
    error the queued tasks are stopped and nothing partial is returned.
    """
    import joblib
    tasks = list(tasks)
    if backend == "threads" and joblib.effective_n_jobs(n_jobs) == 1:
        for key, args in tasks:
            result = fn(*args)
            if on_result is not None:
                on_result(key, result)
        return
    calls = (joblib.delayed(fn)(*args) for _, args in tasks)
    with ExitStack() as stack:
        if backend == "dask":
            session = stack.enter_context(dask_session(scheduler, n_jobs=n_jobs))
            stack.enter_context(joblib.parallel_config(backend="dask", client=session.client))
        else:
            stack.enter_context(joblib.parallel_config(prefer=backend))
        gen = joblib.Parallel(n_jobs=n_jobs, return_as="generator")(calls)
        try:
            for (key, _), result in zip(tasks, gen):
                if on_result is not None:
                    on_result(key, result)
        finally:
            # On KeyboardInterrupt (or any error) stop the queued tasks;
            # nothing partial leaves this function.
            close = getattr(gen, "close", None)
            if close is not None:
                with warnings.catch_warnings():
                    # joblib reports tasks finished but not collected.
                    warnings.simplefilter("ignore", UserWarning)
                    close()


def run_chunks(fn: Callable, task, replicates: int, chunk_size: int, seed, n_jobs=1,
               backend: str = "threads", scheduler=None,
               on_chunk: Callable | None = None) -> list:
    """Run ``fn(task, size, chunk_seed(seed, i))`` over the chunks of
    ``replicates`` (:func:`chunk_sizes`) through :func:`run_tasks` and return
    the chunks' results in chunk order; ``on_chunk(size)`` after each (a
    progress bar).  The chunking of the simulations
    (:mod:`famwise.diagnostics.simulate`, :mod:`famwise.diagnostics.model_simulate`):
    fixed chunks with seeds keyed by position, so the result does not depend
    on ``n_jobs`` or the backend."""
    sizes = chunk_sizes(replicates, chunk_size)
    parts: dict[int, object] = {}

    def collect(index, result):
        parts[index] = result
        if on_chunk is not None:
            on_chunk(sizes[index])

    run_tasks(fn, [(i, (task, s, chunk_seed(seed, i))) for i, s in enumerate(sizes)],
              n_jobs, backend, scheduler, collect)
    return [parts[i] for i in range(len(sizes))]


_want_progress = want_progress     # the name the engine tests use
Progress = _Progress


def _execute(problem, stepdown, tasks, n_jobs, backend, scheduler, on_chunk):
    """Run ``tasks`` [(index, size, state)] and call ``on_chunk(i, result)``."""
    run_tasks(_run_chunk, [(index, (problem, stepdown, size, state))
                           for index, size, state in tasks],
              n_jobs, backend, scheduler, on_chunk)


def run_resamples(problem: ResamplingProblem, *, resamples: int,
                  seed: np.random.SeedSequence, chunk_size: int, n_jobs=1,
                  backend: str = "threads", scheduler=None, progress=None,
                  stepdown: bool = True, previous: ResamplingRun | None = None,
                  on_chunk: Callable | None = None) -> ResamplingRun:
    """Run B resamples of ``problem`` in chunks and gather the counts.

    Parameters
    ----------
    problem : ResamplingProblem
    resamples : int
        B.
    seed : numpy.random.SeedSequence
        The root; chunk ``i`` uses :func:`chunk_seed` (root, i).
    chunk_size : int
        Resamples per chunk (the last chunk takes the remainder).
    n_jobs : int or None, default=1
        joblib's meaning (-1: all cores).
    backend : {"threads", "processes", "dask"}, default="threads"
    scheduler : dask.distributed.Client or str, optional
        For ``backend="dask"``.
    progress : bool or None, default=None
        None shows a bar only on a terminal, outside CI, when the run is
        expected to take more than about two seconds.
    stepdown : bool, default=True
        Accumulate the step-down successive-maxima counts.
    previous : ResamplingRun, optional
        A run with the same problem, seed and chunk size whose complete
        chunks are reused (``resamples="auto"``).

    Returns
    -------
    ResamplingRun
        Identical for every ``n_jobs`` and backend.
    """
    sizes = chunk_sizes(resamples, chunk_size)
    done: dict[int, ChunkResult] = {}
    if previous is not None:
        for i, ch in enumerate(previous.chunks):
            if i < len(sizes) and ch.size == sizes[i]:
                done[i] = ch
    tasks = [(i, s, kernels.seed_state(chunk_seed(seed, i)))
             for i, s in enumerate(sizes) if i not in done]
    to_run = sum(s for _, s, _ in tasks)
    import joblib
    workers = 1 if backend == "dask" else max(1, joblib.effective_n_jobs(n_jobs))
    estimate = _SECONDS_PER_ELEMENT * problem.n_elements * to_run / min(workers, max(len(tasks), 1))
    bar = _Progress(to_run, want_progress(progress, estimate))
    start = time.perf_counter()

    def collect(index, result):
        done[index] = result
        bar.update(result.size)
        if on_chunk is not None:
            on_chunk(index, result)

    try:
        _execute(problem, stepdown, tasks, n_jobs, backend, scheduler, collect)
    finally:
        bar.close()
    chunks = tuple(done[i] for i in range(len(sizes)))
    m = problem.m
    maxima = (np.concatenate([c.maxima for c in chunks]) if chunks else np.empty(0))
    hm = np.zeros(m, dtype=np.int64)
    hs = np.zeros(m, dtype=np.int64)
    for c in chunks:
        hm += c.hits_marginal
        hs += c.hits_stepdown
    return ResamplingRun(
        resamples=int(resamples), seed=_entropy(seed),
        spawn_key=tuple(int(x) for x in seed.spawn_key), chunk_size=int(chunk_size),
        n_chunks=len(sizes), backend=backend, n_jobs=n_jobs, stepdown=stepdown,
        seconds=time.perf_counter() - start, maxima=maxima, hits_marginal=hm,
        hits_stepdown=hs, chunks=chunks)
