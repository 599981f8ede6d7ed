"""Analyse every well of a wellfield on a pluggable executor.

Each well's project is read (:func:`blendq.inputs.loader.load_project`) and analysed
(:func:`blendq.decide.analysis.analyse`) in a task of its own: in this process
(``workers=1``), in local worker processes (the default, one per core), or on a Dask
distributed cluster when a scheduler is named (an optional extra, ``blendq[wellfield]``,
imported only then). A well that fails with an :class:`~blendq.errors.InputError` or
:class:`~blendq.errors.ModelError` is reported with its one-line error; the others go on.

Results do not depend on the executor, the number of workers or the order of the wells: each
well's seed is drawn from the wellfield's seed and the well's name (:func:`well_seed`), and
the wells come back in the file's order. Worker processes never outlive the call: the pool is
shut down on return, on an error and on an interrupt (KeyboardInterrupt, or the command
line's SIGTERM/SIGHUP handler), its running workers terminated.
"""

from __future__ import annotations

import hashlib
import os
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

from blendq.decide.wellfield import WellSummary, summarise
from blendq.errors import BlendqError, InputError

#: largest seed handed to a well's analysis (numpy Generators take any non-negative integer;
#: the project file's seeds stay below 2**63)
_SEED_BITS = 63


def well_seed(wellfield_seed: int, name: str) -> int:
    """A well's seed from the wellfield's seed and the well's name: the first 63 bits of
    SHA-256 of ``"<seed>:<name>"`` (independent of the well's place in the file or of the
    worker that runs it).

    References
    ----------
    NIST FIPS 180-4, Secure Hash Standard (SHA-256).
    """
    digest = hashlib.sha256(f"{int(wellfield_seed)}:{name}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> (64 - _SEED_BITS)


@dataclass(frozen=True)
class WellTask:
    """One well to analyse (plain, picklable)."""

    name: str
    entry_point: str
    project: Path
    seed: int | None = None
    draws: int | None = None
    rate_min: float | None = None
    rate_max: float | None = None
    keep_analysis: bool = True
    #: where the well stands in the wellfield file ("wellfield.toml", "wells[2]"), for messages
    file: str = ""
    key: str = ""


@dataclass
class WellOutcome:
    """The analysis of one well, or why it failed.

    Attributes
    ----------
    name, entry_point : str
    summary : WellSummary or None
        None when the well failed.
    analysis : Analysis or None
        The whole analysis when asked for (``keep_analysis``) and the well did not fail.
    error : str or None
        The one-line error of a failed well.
    seconds, cpu_seconds : float
        Wall-clock and processor time the well's task took [s] (a loaded machine shows as
        wall-clock time well above the processor time).
    """

    name: str
    entry_point: str
    summary: WellSummary | None = None
    analysis: object | None = None
    error: str | None = None
    seconds: float = 0.0
    cpu_seconds: float = 0.0

    @property
    def failed(self) -> bool:
        return self.summary is None


def analyse_well(task: WellTask) -> WellOutcome:
    """Read and analyse one well's project (runs in a worker); errors become the outcome's
    one-line ``error``."""
    from blendq.decide.analysis import analyse
    from blendq.inputs.loader import load_project
    from blendq.inputs.tables import one_line

    start, cpu = time.perf_counter(), time.process_time()
    try:
        project = load_project(task.project)
        if task.rate_min is not None or task.rate_max is not None:
            well = project.well
            lo = well.rate_min if task.rate_min is None else task.rate_min
            hi = well.rate_max if task.rate_max is None else task.rate_max
            if hi <= lo:
                raise InputError(f"the rate range {lo:g} to {hi:g} m3/d (the wellfield's and "
                                 "the project's rate_min and rate_max) is empty",
                                 file=task.file or None, field=f"{task.key}.rate_max")
            project = replace(project, well=replace(well, rate_min=lo, rate_max=hi))
        seed = project.settings.seed if task.seed is None else task.seed
        a = analyse(project, draws=task.draws, seed=seed)
        summary = summarise(a, task.name, task.entry_point, seed)
    except (BlendqError, OSError, UnicodeDecodeError) as exc:  # a bad input of this well
        text = str(exc) if isinstance(exc, BlendqError) else f"{type(exc).__name__}: {exc}"
        return WellOutcome(task.name, task.entry_point, error=one_line(text),
                           seconds=time.perf_counter() - start,
                           cpu_seconds=time.process_time() - cpu)
    return WellOutcome(task.name, task.entry_point, summary,
                       a if task.keep_analysis else None,
                       seconds=time.perf_counter() - start,
                       cpu_seconds=time.process_time() - cpu)


def tasks_for(wellfield, seed: int | None = None, draws: int | None = None,
              keep_analysis: bool = True) -> list[WellTask]:
    """One task per well of a :class:`blendq.inputs.wellfield_file.Wellfield`, in file order.

    ``seed`` overrides the wellfield's; with neither, each project's own seed is used.
    """
    base = wellfield.seed if seed is None else seed
    return [WellTask(w.name, w.entry_point, w.project,
                     None if base is None else well_seed(base, w.name), draws,
                     w.rate_min, w.rate_max, keep_analysis, wellfield.path.name, w.key)
            for w in wellfield.wells]


def run_batch(tasks: list[WellTask], workers: int | None = None, scheduler=None,
              progress: Callable[[int, int, str], None] | None = None) -> list[WellOutcome]:
    """Analyse every task's well; the outcomes in the tasks' order.

    Parameters
    ----------
    tasks : list of WellTask
    workers : int, optional
        Local worker processes (default: the number of cores, at most the number of wells);
        1 runs every well in this process. Ignored with ``scheduler``.
    scheduler : str or distributed.Client, optional
        A Dask scheduler address ("tcp://host:8786") or a connected client: the wells run on
        that cluster (needs the optional extra ``blendq[wellfield]``).
    progress : callable(done, total, well name), optional
        Called as each well finishes.

    Returns
    -------
    list of WellOutcome

    Raises
    ------
    InputError
        A bad ``workers`` value, or Dask asked for but not installed.
    """
    total = len(tasks)
    results: dict[int, WellOutcome] = {}

    def done(k: int, outcome: WellOutcome) -> None:
        results[k] = outcome
        if progress is not None:
            progress(len(results), total, outcome.name)

    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"{workers!r} is not a number of workers (a whole number, 1 or more)",
                         field="--workers")
    if scheduler is not None:
        _run_dask(tasks, scheduler, done)
    else:
        n = min(workers or os.cpu_count() or 1, max(total, 1))
        if n == 1:
            for k, task in enumerate(tasks):
                done(k, analyse_well(task))
        else:
            _run_processes(tasks, n, done)
    return [results[k] for k in range(total)]


def _run_processes(tasks: list[WellTask], n: int, done) -> None:
    """Local worker processes (started fresh, "spawn": nothing of this process's threads or
    open files is copied into them)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    with _pipe_errors_not_fatal(), _one_blas_thread():
        pool = ProcessPoolExecutor(n, mp_context=multiprocessing.get_context("spawn"))
        try:
            futures = {pool.submit(analyse_well, t): k for k, t in enumerate(tasks)}
            for f in as_completed(futures):
                done(futures[f], f.result())
        except BaseException:  # an error, Ctrl-C or the command line's SIGTERM: no worker
            _terminate(pool)   # stays
            raise
        pool.shutdown(wait=True)


#: environment variables of the BLAS/OpenMP thread pools a worker process would start
BLAS_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


@contextmanager
def _one_blas_thread() -> Iterator[None]:
    """One BLAS thread in each worker process (the workers already use every core; a BLAS
    pool per worker would oversubscribe them): the variables the user has not set are set to
    "1" while the pool starts its workers, which inherit them, and removed again after."""
    added = [k for k in BLAS_THREAD_VARIABLES if k not in os.environ]
    for k in added:
        os.environ[k] = "1"
    try:
        yield
    finally:
        for k in added:
            os.environ.pop(k, None)


@contextmanager
def _pipe_errors_not_fatal() -> Iterator[None]:
    """Ignore SIGPIPE while the pool lives (main thread only): the command line restores its
    default action (so that ``blendq ... | head`` ends quietly), and then the pool's queue
    feeding a worker just terminated would end the whole command; ignored, the write fails
    with an error the pool handles."""
    import signal
    import threading

    if not hasattr(signal, "SIGPIPE") or threading.current_thread() is not threading.main_thread():
        yield
        return
    before = signal.signal(signal.SIGPIPE, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGPIPE, before)


def _terminate(pool) -> None:
    """Cancel what has not started and end the running workers at once (the pool's own
    shutdown would wait for each running well to finish)."""
    stop = getattr(pool, "terminate_workers", None)  # Python 3.14+
    if stop is not None:
        stop()
        return
    # Python < 3.14: the pool's processes and manager thread, taken before the shutdown
    # forgets them
    processes = list((getattr(pool, "_processes", None) or {}).values())
    manager = getattr(pool, "_executor_manager_thread", None)
    pool.shutdown(wait=False, cancel_futures=True)
    for p in processes:
        if p.is_alive():
            p.terminate()
    for p in processes:
        p.join(timeout=10)
    if manager is not None:
        manager.join(timeout=10)


def dask_client(scheduler):
    """A Dask ``distributed.Client`` for ``scheduler`` (an address or a client) and whether
    this call made it (and so closes it)."""
    try:
        import distributed
    except ImportError:
        raise InputError("running on a Dask cluster needs the optional extra: pip install "
                         "'blendq[wellfield]'", field="--scheduler") from None
    if isinstance(scheduler, distributed.Client):
        return scheduler, False
    if not isinstance(scheduler, str) or not scheduler.strip():
        raise InputError(f"{scheduler!r} is not a Dask scheduler address such as "
                         '"tcp://127.0.0.1:8786"', field="--scheduler")
    try:
        return distributed.Client(scheduler.strip(), timeout="10s"), True
    except OSError as exc:
        raise InputError(f'cannot reach the Dask scheduler "{scheduler}": {exc}',
                         field="--scheduler") from None


def _run_dask(tasks: list[WellTask], scheduler, done) -> None:
    client, own = dask_client(scheduler)
    from distributed import as_completed

    futures = []
    try:
        # pure=False: each call runs (the wells' seeds already make the results repeatable)
        futures = client.map(analyse_well, tasks, pure=False)
        index = {f.key: k for k, f in enumerate(futures)}
        for f in as_completed(futures):
            done(index[f.key], f.result())
    except BaseException:
        client.cancel(futures)
        raise
    finally:
        if own:
            client.close()
