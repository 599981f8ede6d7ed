"""Draw the report's charts in worker processes while the main process goes on.

Drawing the charts is the largest single cost of a report, and the analysis cannot be split
across processes, so the two overlap. A :class:`ChartPool` forks a chart server; the report
commands make it after their own imports (numpy, pandas, pint, scipy), which it shares, and
before loading the project. The server imports matplotlib on the second core while the main
process loads the project and runs the analysis, then forks two workers, which share that
import too. The charts are handed over as :class:`ChartJob` objects (a module-level drawing
function and its arguments, sent by pickling) and come back as PNG bytes and SVG text, while
the main process builds the text of the report.

Where the system cannot fork (Windows, macOS' default start method) or has one core, the pool
draws the charts in the main process when asked; the bytes are the same either way. Ctrl-C is
left to the main process, which closes the pool.
"""

from __future__ import annotations

import atexit
import functools
import io
import multiprocessing as mp
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the module imports nothing heavy: a pool can start before numpy is loaded
    from blendq.report.document import Figure

__all__ = ["CHART_DPI", "ChartJob", "ChartPool", "render_chart"]

CHART_DPI = 110.0  #: resolution of the chart images [dots per inch]


@dataclass(frozen=True)
class ChartJob:
    """One chart of a report.

    Parameters
    ----------
    caption : str
        Figure caption.
    draw : callable
        A module-level function (so that it can be sent to a worker) returning a matplotlib
        :class:`~matplotlib.figure.Figure`.
    args : tuple
        Arguments of ``draw``.
    svg : bool
        Also write the chart as SVG (the HTML report shows the SVG where there is one).
    alt : str
        Text alternative; defaults to the caption.
    """

    caption: str
    draw: Callable[..., Any]
    args: tuple = ()
    svg: bool = True
    alt: str = ""

    def figure(self, rendered: tuple[bytes, str | None]) -> Figure:
        """The document figure holding this chart's rendered PNG (and SVG)."""
        from blendq.report.document import Figure

        png, svg = rendered
        return Figure(self.caption, alt=self.alt, png=png, svg=svg)


def render_chart(job: ChartJob) -> tuple[bytes, str | None]:
    """Draw a chart as PNG bytes at :data:`CHART_DPI` and, if asked, SVG text.

    The figure is laid out once, for the PNG; the SVG keeps that layout. Neither file carries
    a date or a software version, and the SVG's element ids are not random, so the same chart
    gives the same bytes.
    """
    fig = job.draw(*job.args)
    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=CHART_DPI, metadata={"Software": None})
    svg = None
    if job.svg:
        from matplotlib import rc_context

        fig.set_layout_engine("none")  # keep the positions the PNG's layout found
        text = io.StringIO()
        # a fixed salt for the element ids (matplotlib draws them at random otherwise)
        with rc_context({"svg.hashsalt": "blendq"}):
            fig.savefig(text, format="svg", metadata={"Date": None, "Creator": None})
        svg = text.getvalue()
    return png.getvalue(), svg


def _render_in_worker(job: ChartJob) -> tuple[bytes, str | None]:
    """:func:`render_chart` in a worker: an error that cannot be sent back as it is (pickled)
    is sent as its type and text."""
    import pickle

    try:
        return render_chart(job)
    except Exception as exc:
        try:
            pickle.dumps(exc)
        except Exception:
            raise RuntimeError(f"{type(exc).__name__}: {exc}") from None
        raise


def _warm_up() -> None:
    """Import matplotlib and load the chart font before the first chart comes."""
    from matplotlib.backends import backend_agg, backend_svg  # noqa: F401
    from matplotlib.figure import Figure as MplFigure

    fig = MplFigure(figsize=(1.0, 1.0))
    fig.text(0.5, 0.5, "0.5 m³/d", fontsize=8)
    fig.savefig(io.BytesIO(), format="png", dpi=20)


def _serve(requests: Any, results: Any, processes: int) -> None:
    """The chart server: import once, fork the workers, then pass jobs on until told to stop.

    Runs in its own process. Everything a job needs (matplotlib, and pandas, pint and scipy
    to unpickle an analysis, when the caller has not imported them already) is imported here
    before the workers are forked, so they start with it. A request is ``(ticket, jobs)``; the
    answer ``(ticket, True, [(png, svg), ...])`` or ``(ticket, False, exception)``. ``None`` or
    a closed pipe ends the server.
    """
    import signal
    import threading

    # Ctrl-C is the main process's to handle: it closes the pool, which ends this server and
    # its workers (they inherit this setting) without a traceback from each
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _warm_up()
    import blendq.decide.analysis  # noqa: F401 - what unpickling an analysis needs
    import blendq.report.assemble  # noqa: F401 - and the chart functions the jobs name

    lock = threading.Lock()  # answers come from the pool's result thread

    def answer(message: tuple) -> None:
        with lock:
            try:
                results.send(message)
            except Exception as exc:  # an error that cannot be pickled: send its text instead
                results.send((message[0], False, RuntimeError(f"chart worker: {exc!r}")))

    with mp.get_context("fork").Pool(processes) as pool:
        while True:
            try:
                request = requests.recv()
            except (EOFError, OSError):
                break
            if request is None:
                break
            ticket, jobs = request
            pool.map_async(_render_in_worker, jobs, chunksize=1,
                           callback=lambda out, t=ticket: answer((t, True, out)),
                           error_callback=lambda exc, t=ticket: answer((t, False, exc)))
        pool.terminate()


def _stop_server(server: Any, requests: Any) -> None:
    """Ask the chart server to stop its workers and end; end it if it does not."""
    try:
        requests.send(None)
        requests.close()
    except (OSError, ValueError):  # already closed
        pass
    server.join(timeout=10.0)
    if server.is_alive():
        server.terminate()
        server.join()


class ChartPool:
    """Worker processes that draw charts, started when the pool is made.

    A server process is forked at once; it imports matplotlib (and what the jobs need) while
    the caller goes on with its own work, then forks ``processes`` workers that share those
    imports. Make it after the caller's own heavy imports, so that the server shares them.
    Use as a context manager; leaving it stops the server and its workers, also on an error.

    Parameters
    ----------
    processes : int
        Number of workers; 0 draws in the calling process.
    """

    def __init__(self, processes: int = 2) -> None:
        self._server: Any = None
        self._requests: Any = None
        self._results: Any = None
        self._tickets = 0
        self._answers: dict[int, tuple[bool, Any]] = {}
        if (processes > 0 and (os.cpu_count() or 1) > 1
                and "fork" in mp.get_all_start_methods()):
            ctx = mp.get_context("fork")
            get_requests, self._requests = ctx.Pipe(duplex=False)
            self._results, send_results = ctx.Pipe(duplex=False)
            self._server = ctx.Process(target=_serve, args=(get_requests, send_results,
                                                            processes), name="blendq-charts")
            self._server.start()
            get_requests.close()
            send_results.close()
            # a pool left open must not keep the interpreter waiting for its server at exit
            self._stop = functools.partial(_stop_server, self._server, self._requests)
            atexit.register(self._stop)

    def __enter__(self) -> ChartPool:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Stop the server and its workers (charts not yet collected are dropped)."""
        if self._server is not None:
            atexit.unregister(self._stop)
            self._stop()
            self._results.close()
            self._server = None

    def submit(self, jobs: Sequence[ChartJob]) -> Callable[[], list[Figure]]:
        """Start drawing ``jobs``; returns a function that waits for them and gives the
        document figures in the order of ``jobs``."""
        jobs = list(jobs)
        if self._server is None or not jobs:
            return lambda: [job.figure(render_chart(job)) for job in jobs]
        ticket = self._tickets
        self._tickets += 1
        self._requests.send((ticket, jobs))

        def collect() -> list[Figure]:
            while ticket not in self._answers:
                if self._server is None:
                    raise RuntimeError("the chart pool was closed before its charts came")
                number, ok, payload = self._results.recv()
                self._answers[number] = (ok, payload)
            ok, payload = self._answers.pop(ticket)
            if not ok:
                raise payload
            return [job.figure(r) for job, r in zip(jobs, payload, strict=True)]

        return collect
