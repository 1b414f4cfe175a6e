"""Hands-free hints while a preamp is aligned: what to turn next, in words.

The hint for each refresh is built from the fast curve measures
(:mod:`analysis.tuning.curve`) and, when available, from the latest passband fit (number of
circuits and their Q, :func:`analysis.passband.fit_passband`) and the maximally flat stagger plan
for the target (:func:`analysis.passband.design_stagger`). The fit takes about half a second, so
:class:`FitWorker` runs it on a background thread, one at a time, on the newest curve; the hint
uses whichever fit finished last and the display never waits for one. Plans are cached per
(target, fitted circuits).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from analysis.errors import AnalysisError
from analysis.tuning.curve import CurveMeasures

# The passband fit and the stagger plan live in the passband analysis; these two lines are the
# only places this module depends on where that analysis is kept.
from analysis.passband import PassbandFit, StaggerPlan, design_stagger, fit_passband

#: A curve narrower than this fraction of the target is "narrow".
NARROW_FRACTION = 0.9
#: The target counts as covered when at least this fraction lies within 3 dB.
COVERED_FRACTION = 0.99


@dataclass(frozen=True)
class TuningHint:
    """One hint: ``kind`` is ``narrow``, ``off-centre``, ``covered`` or ``wide-open``; ``text`` the words."""

    kind: str
    text: str
    plan: StaggerPlan | None = None


def _mhz(hz: float) -> str:
    return f"{hz / 1e6:.2f}"


def _plan_words(plan: StaggerPlan, n: int) -> str:
    circuits = ", ".join(f"{_mhz(s.f0_hz)} MHz Q {s.q:.1f}" for s in plan.stages)
    gain = ""
    if plan.peak_gain_change_db is not None:
        gain = f", peak gain {plan.peak_gain_change_db:+.1f} dB for passive circuits of unloaded Q {plan.q_unloaded:.0f}"
    return f"{n} circuit{'s' if n > 1 else ''} fitted; maximally flat plan: {circuits}{gain}"


def hint_for(measures: CurveMeasures, fit: PassbandFit | None = None,
             plan: StaggerPlan | None = None) -> TuningHint:
    """The hint for one refresh (pure and fast; ``plan`` from :func:`stagger_plan_for`)."""
    lo, hi = measures.target_hz
    target_w = hi - lo
    width = measures.width_hz
    frac = measures.target_within_3db_fraction
    if np.isfinite(width) and width < NARROW_FRACTION * target_w:
        single = fit is not None and fit.n_circuits == 1
        action = ("load the circuit to a lower Q, or add circuits and stagger them" if single
                  else "stagger the circuits")
        text = f"{width / 1e6:.1f} MHz wide at -3 dB, target {target_w / 1e6:.3g} MHz: {action}"
        if fit is not None and plan is not None:
            text += f" ({_plan_words(plan, fit.n_circuits)})"
        return TuningHint("narrow", text + ", see `passband` advice", plan)
    if frac >= COVERED_FRACTION:
        return TuningHint("covered", f"target within 3 dB (least gain {measures.min_gain_in_target_db:.1f} dB): aligned")
    centre = float(np.sqrt(lo * hi))
    if not np.isfinite(width):
        mid = measures.peak_hz
    else:
        mid = 0.5 * (measures.edge_low_hz + measures.edge_high_hz)
    shift = centre - mid
    way = "up" if shift > 0 else "down"
    return TuningHint("off-centre", f"{100 * frac:.0f} % of the target within 3 dB, passband centred at "
                                    f"{_mhz(mid)} MHz: move the circuits {way} by {abs(shift) / 1e6:.1f} MHz")


def stagger_plan_for(target_hz: tuple[float, float], fit: PassbandFit) -> StaggerPlan | None:
    """Maximally flat plan for the target with the fitted number of circuits (None if none can be made)."""
    try:
        return design_stagger(target_hz, fit.n_circuits, fit.stages)
    except AnalysisError:
        return None


class FitWorker:
    """Runs the passband fit on the newest curve in a background thread, one fit at a time.

    :meth:`offer` never blocks: it hands the curve over when no fit is running (else it keeps
    it as the next one, replacing an older waiting curve). :meth:`latest` returns the last
    finished fit and its stagger plan. With ``inline=True`` the fit runs inside :meth:`offer`
    (deterministic, for tests and replays).
    """

    def __init__(self, target_hz: tuple[float, float], max_circuits: int = 3, inline: bool = False):
        self.target_hz = (float(target_hz[0]), float(target_hz[1]))
        self.max_circuits = int(max_circuits)
        self.inline = bool(inline)
        self._lock = threading.Lock()
        self._waiting: tuple[np.ndarray, np.ndarray] | None = None
        self._busy = False
        self._latest: tuple[PassbandFit, StaggerPlan | None] | None = None
        self._thread: threading.Thread | None = None
        self.fits_done = 0
        #: Why the last fit failed (None when it did not): the display goes on without it.
        self.last_error: str | None = None

    def offer(self, freqs_hz: Sequence[float], gain_db: Sequence[float]) -> None:
        """Give the worker the newest curve (points with NaN are dropped)."""
        f = np.asarray(freqs_hz, np.float64)
        g = np.asarray(gain_db, np.float64)
        ok = np.isfinite(f) & np.isfinite(g)
        if np.count_nonzero(ok) < 3:
            return
        item = (f[ok].copy(), g[ok].copy())
        if self.inline:
            self._fit(item)
            return
        with self._lock:
            self._waiting = item
            if self._busy:
                return
            self._busy = True
        self._thread = threading.Thread(target=self._run, name="passband-fit", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            with self._lock:
                item, self._waiting = self._waiting, None
                if item is None:
                    self._busy = False
                    return
            self._fit(item)

    def _fit(self, item: tuple[np.ndarray, np.ndarray]) -> None:
        try:
            fit = fit_passband(item[0], item[1], max_circuits=self.max_circuits, floor_offset=True)
        except Exception as exc:  # noqa: BLE001  a hint is optional: keep the reason, keep the display going
            with self._lock:
                self.last_error = f"{type(exc).__name__}: {exc}"
            return
        plan = stagger_plan_for(self.target_hz, fit)
        with self._lock:
            self._latest = (fit, plan)
            self.fits_done += 1

    def latest(self) -> tuple[PassbandFit | None, StaggerPlan | None]:
        """The last finished fit and its plan, or ``(None, None)``."""
        with self._lock:
            return self._latest if self._latest is not None else (None, None)

    def join(self, timeout_s: float = 5.0) -> None:
        """Wait for a running fit to end (at the end of a session)."""
        t = self._thread
        if t is not None:
            t.join(timeout_s)
