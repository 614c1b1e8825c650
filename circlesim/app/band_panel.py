"""The planner's band over similar patients: its settings and a background worker.

The main curve is predicted on every change in the kernel's own thread (milliseconds). The
band needs a batch of patients, so :class:`BandWorker` runs it in the background: one thread
takes the requests and splits the patients between as many threads as the machine has cores
(at most :data:`MAX_BAND_THREADS`), all at the lowest priority and without numba's worker
threads, so that the band only takes the processor time the browser drawing the main curve
leaves over. Each change hands the worker the newest scenario and returns at once; the worker
always takes the newest request (older ones are dropped) and calls back only if no newer change
arrived while it ran. The batch integration is compiled with ``nogil``, so the kernel keeps
answering the page while the band is computed.

Bad band settings (patients outside 20–2,000, a percentile outside 1–99) show an inline error
naming the field; the band on screen stays the last good one.
"""

from __future__ import annotations

import html
import os
import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import fields
from pathlib import Path

import ipywidgets as w

from circlesim.base.validation import InputError
from circlesim.population.band import Band, BandSettings, run_band
from circlesim.scenario import Scenario

__all__ = ["MAX_BAND_THREADS", "BandPanel", "BandWorker", "band_outcomes_html",
           "band_warnings_html", "kernel_loop", "measured_points", "on_main_thread"]


def kernel_loop():
    """The Jupyter kernel's event loop (tornado ``IOLoop``), or None outside a kernel."""
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - IPython comes with ipykernel
        return None
    return getattr(getattr(get_ipython(), "kernel", None), "io_loop", None)


def on_main_thread(fn: Callable[[], None]) -> None:
    """Run ``fn`` on the kernel's main thread (between the page's messages), or at once when
    there is no kernel (plain Python, tests).

    Widget updates that carry binary buffers (the figure's curves) reach the page reliably only
    from the kernel's own thread, so the worker hands its result over instead of drawing.
    """
    loop = kernel_loop()
    if loop is None:
        fn()
    else:
        loop.add_callback(fn)

#: Most threads the band's patients are split between.
MAX_BAND_THREADS = 4

#: Text boxes of the panel: BandSettings field -> (label, unit).
_FIELDS = {"patients": ("Similar patients", ""),
           "low_percentile": ("Lower edge", "percentile"),
           "high_percentile": ("Upper edge", "percentile")}


class BandWorker:
    """Runs :func:`~circlesim.population.band.run_band` on a background thread, newest first.

    Parameters
    ----------
    done : callable
        ``done(band, elapsed_ms, generation)`` on the worker thread, for the newest request.
    failed : callable
        ``failed(message, generation)`` when the band cannot be run.
    """

    def __init__(self, done: Callable[[Band, float, int], None],
                 failed: Callable[[str, int], None]) -> None:
        self._done, self._failed = done, failed
        self._lock = threading.Condition()
        self._request: tuple | None = None
        self.generation = 0
        self.busy = False
        self._threads = max(1, min(MAX_BAND_THREADS, os.cpu_count() or 1))
        self._pool = ThreadPoolExecutor(self._threads, thread_name_prefix="circlesim-band",
                                        initializer=_yield_to_others)
        self._thread = threading.Thread(target=self._loop, name="circlesim-band", daemon=True)
        self._thread.start()

    def submit(self, scenario: Scenario, settings: BandSettings, plan=None) -> int:
        """Ask for a band (returns at once); returns the request's generation number."""
        with self._lock:
            self.generation += 1
            self._request = (self.generation, scenario, settings, plan)
            self._lock.notify()
            return self.generation

    def cancel(self) -> None:
        """Forget any pending request (a result still running is dropped)."""
        with self._lock:
            self.generation += 1
            self._request = None

    def _loop(self) -> None:
        _yield_to_others()
        while True:
            with self._lock:
                while self._request is None:
                    self._lock.wait()
                generation, scenario, settings, plan = self._request
                self._request = None
                self.busy = True
            start = time.perf_counter()
            try:
                band = run_band(scenario, settings, plan=plan, pool=self._pool,
                                chunks=self._threads)
            except Exception as exc:  # shown inline, never a traceback
                message = str(exc) if isinstance(exc, InputError) else (
                    f"the band could not be computed ({type(exc).__name__}: {exc})")
                if generation == self.generation:
                    self._failed(message, generation)
            else:
                if generation == self.generation:
                    self._done(band, 1000.0 * (time.perf_counter() - start), generation)
            finally:
                self.busy = False


def _yield_to_others() -> None:
    """Give the calling thread the lowest scheduling priority (Linux: niceness is per thread).

    The band then runs on the time the browser, the server and the kernel's main thread leave
    over, so drawing the main curve is not slowed down by the band computed behind it.
    """
    if sys.platform.startswith("linux"):
        try:
            os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), 19)
        except OSError:  # pragma: no cover - lowering one's priority is always allowed
            pass


class BandPanel:
    """Switch and settings of the band.

    Attributes
    ----------
    enabled : ipywidgets.Checkbox
    boxes : dict of str -> ipywidgets.Text
        One per field in ``_FIELDS``.
    error : ipywidgets.HTML
    status : ipywidgets.HTML
    widget : ipywidgets.VBox
    """

    def __init__(self) -> None:
        self.enabled = w.Checkbox(value=True, description="Show the spread over similar "
                                  "patients", indent=False, layout=w.Layout(width="auto"))
        self.enabled.add_class("cs-band-on")
        defaults = BandSettings()
        self.boxes: dict[str, w.Text] = {}
        rows = []
        for key, (label, unit) in _FIELDS.items():
            box = w.Text(value=f"{getattr(defaults, key):g}", continuous_update=False,
                         layout=w.Layout(width="80px"))
            box.add_class(f"cs-band-{key.replace('_', '-')}")
            self.boxes[key] = box
            rows.append(w.HBox([w.HTML(f"<span class='cs-label'>{label} "
                                       f"<span class='cs-unit'>{unit}</span></span>",
                                       layout=w.Layout(width="150px")), box]))
        self.error = w.HTML()
        self.error.add_class("cs-band-error")
        self.status = w.HTML()
        self.status.add_class("cs-band-status")
        note = ("<div class='cs-note'>Virtual patients with the entered age, weight, height "
                "and sex; cardiac output, FRC, O2 consumption and blood/gas solubility drawn "
                "from the population distributions (sources in docs/population.md). A scenario "
                "fitted to a measured case draws from the fit instead and shows the measured "
                "points.</div>")
        self.widget = w.VBox([self.enabled, *rows, self.error, self.status, w.HTML(note)])
        self.widget.add_class("cs-band-panel")
        self.settings = defaults

    def observe(self, callback: Callable[[dict], None]) -> None:
        """Call ``callback(change)`` when the switch or a setting changes."""
        self.enabled.observe(callback, names="value")
        for box in self.boxes.values():
            box.observe(callback, names="value")

    def read(self) -> BandSettings:
        """The settings the boxes describe.

        Raises
        ------
        InputError
            Naming the field ("Similar patients", …), the value and the allowed range.
        """
        values = {}
        names = {f.name: f for f in fields(BandSettings)}
        for key, box in self.boxes.items():
            label = _FIELDS[key][0]
            text = box.value.strip()
            try:
                values[key] = float(text)
            except ValueError:
                constraint = names[key].metadata["constraint"]
                raise InputError(f"{label} must be {constraint.describe()}; got "
                                 f"{text!r}.") from None
        try:
            return BandSettings(**values, seed=self.settings.seed, spread=self.settings.spread)
        except InputError as exc:
            message = str(exc)
            for key, (label, _) in _FIELDS.items():
                message = message.replace(f"BandSettings.{key}", label)
            raise InputError(message) from None

    def show_error(self, message: str | None) -> None:
        """An inline error under the boxes ("" or None clears it)."""
        self.error.value = "" if not message else (
            f"<div class='cs-error' role='alert'><b>Band not updated:</b> "
            f"{html.escape(message)} <span class='cs-unit'>The band shown is the last good "
            "one.</span></div>")


def band_outcomes_html(band: Band | None) -> str:
    """The outcome ranges over similar patients, as a small table ("" without a band)."""
    if band is None:
        return ""
    o = band.outcomes

    def span(key: str, fmt: str, unit: str) -> str:
        lo, hi = o[key]
        if lo != lo:  # NaN: nobody reached it
            return "not reached"
        return f"{lo:{fmt}}–{hi:{fmt}}{unit}"

    rows = [("Time to end-tidal target", span("time_to_target_min", ".1f", " min")),
            ("Lowest FIO2", span("lowest_fio2", ".2f", "")),
            ("End-tidal agent at the end", span("end_tidal_at_end", ".2f", " vol%")),
            ("Liquid agent used", span("agent_delivered_ml", ".1f", " mL"))]
    who = "fit draws" if band.basis.startswith("the fit") else "similar patients"
    body = "".join(f"<tr><td>{a}</td><td>{b}</td></tr>" for a, b in rows)
    return (f"<table class='cs-table cs-band-outcomes'><tr><th>Range over {band.n} {who}"
            f"</th><th>{band.settings.label}</th></tr>{body}</table>")


def band_warnings_html(band: Band | None, stale: bool = False) -> str:
    """The band's threshold sentences as alerts ("" when none)."""
    if band is None:
        return ""
    tail = " <span class='cs-unit'>(last band that ran)</span>" if stale else ""
    return "".join(f"<div class='cs-alert cs-warning cs-band-alert'><span class='cs-badge'>"
                   f"Spread</span> {html.escape(s)}{tail}</div>" for s in band.warnings())


def measured_points(record_path: Path, agent: str) -> tuple:
    """The agent and O2 values of the case record at ``record_path`` as figure points (none
    when the record cannot be read: the band is still drawn)."""
    from circlesim.cases.record import load_case
    from circlesim.reports.band import MeasuredPoints

    try:
        record = load_case(record_path)
    except InputError:
        return ()
    points = []
    for series, values in record.measured.items():
        if series.gas == agent:
            points.append(MeasuredPoints(f"Measured {series.label}", record.time_min, values, 1))
        elif series.gas == "oxygen":
            points.append(MeasuredPoints(f"Measured {series.label}", record.time_min,
                                         values / 100.0, 2))
    return tuple(points)
