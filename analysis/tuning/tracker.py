"""Follows a tuning session refresh by refresh: gain curve, measures, best curve so far, hint.

:class:`TuneTracker` turns one sweep's channel rows into a :class:`TuneFrame` (what the terminal
view, the local page and the JSON lines show). Per refresh it does O(channels) numpy work; the
passband fit for the hints runs on :class:`analysis.tuning.hints.FitWorker`'s thread, offered a
curve at most every ``fit_every_s`` of session time.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from analysis.errors import AnalysisError
from analysis.tuning.curve import CurveMeasures, KeptCurve, better_than, measure_curve, noise_gain_db, station_gain_db
from analysis.tuning.hints import FitWorker, TuningHint, hint_for
from analysis.tuning.reference import TuningReference

#: Inputs a tuning session understands: a noise source, or the stations on air.
TUNE_INPUTS = ("noise", "antenna")


@dataclass(frozen=True)
class TuneFrame:
    """One refresh as shown: session time (s), curve points (Hz, dB), measures, best, hint, rate."""

    t_s: float
    refresh: int
    freqs_hz: np.ndarray
    gain_db: np.ndarray
    measures: CurveMeasures | None
    best: KeptCurve | None
    hint: TuningHint | None
    refresh_rate_hz: float | None
    stored_sweep_id: int | None
    input: str
    stations_hz: tuple[int, ...] = ()

    def json_line(self) -> dict:
        """The machine-readable record of this refresh (frequencies in Hz, levels in dB)."""
        m = self.measures
        nan = float("nan")
        return {
            "t_s": round(self.t_s, 4),
            "refresh": self.refresh,
            "peak_hz": m.peak_hz if m else nan,
            "peak_gain_db": m.peak_gain_db if m else nan,
            "edge_low_hz": m.edge_low_hz if m else nan,
            "edge_high_hz": m.edge_high_hz if m else nan,
            "width_hz": m.width_hz if m else nan,
            "target_within_3db_fraction": m.target_within_3db_fraction if m else nan,
            "stations_inside_hz": list(m.stations_inside_hz) if m else [],
            "hint": self.hint.text if self.hint else None,
            "refresh_rate_hz": self.refresh_rate_hz,
            "stored_sweep_id": self.stored_sweep_id,
        }

    def page_state(self) -> dict:
        """Everything the local page draws: the :meth:`json_line` keys plus curves and target."""
        d = self.json_line()
        m = self.measures
        d.update({
            "input": self.input,
            "freqs_hz": self.freqs_hz.tolist(),
            "gain_db": self.gain_db.tolist(),
            "best_gain_db": None if self.best is None else self.best.gain_db.tolist(),
            "best_freqs_hz": None if self.best is None else self.best.freqs_hz.tolist(),
            "best_t_s": None if self.best is None else self.best.t_s,
            "best_fraction": None if self.best is None else self.best.measures.target_within_3db_fraction,
            "target_hz": None if m is None else list(m.target_hz),
            "stations_hz": list(self.stations_hz),
            "stations_outside_hz": list(m.stations_outside_hz) if m else [],
        })
        return d


class TuneTracker:
    """Keeps the state of a session between refreshes.

    Parameters
    ----------
    target_hz : (float, float)
        The band the preamp should cover, Hz.
    reference : TuningReference
        The receiver alone with the same input.
    input_kind : str
        ``"noise"`` (gain = rise in channel power) or ``"antenna"`` (gain of the stations'
        signal-only power, on stations received in both).
    fit_worker : FitWorker, optional
        Runs the passband fit for the hints; None: hints from the measures alone.
    fit_every_s : float
        Session time between two curves offered to the fit.
    """

    def __init__(self, target_hz: tuple[float, float], reference: TuningReference, input_kind: str,
                 channel_bw_hz: float, fit_worker: FitWorker | None = None, fit_every_s: float = 2.0):
        if input_kind not in TUNE_INPUTS:
            raise AnalysisError(f"tuning input '{input_kind}' is not one of {', '.join(TUNE_INPUTS)}")
        self.target_hz = (float(target_hz[0]), float(target_hz[1]))
        self.reference = reference
        self.input_kind = input_kind
        self.channel_bw_db = 10.0 * np.log10(float(channel_bw_hz))
        self.fit_worker = fit_worker
        self.fit_every_s = float(fit_every_s)
        self.best: KeptCurve | None = None
        self._last_fit_s: float | None = None
        self._times: deque[float] = deque(maxlen=11)
        lo, hi = self.target_hz
        self.stations_hz = tuple(s for s in reference.stations_hz if lo <= s <= hi) if input_kind == "antenna" else ()

    def curve(self, freqs_hz: Sequence[float], power_dbfs: Sequence[float], noise_dbfs: Sequence[float],
              received: Sequence[bool]) -> tuple[np.ndarray, np.ndarray]:
        """Gain curve (Hz, dB) of one sweep against the reference; NaN where there is no point."""
        f = np.asarray(freqs_hz, np.float64)
        p = np.asarray(power_dbfs, np.float64) - self.channel_bw_db
        n = np.asarray(noise_dbfs, np.float64) - self.channel_bw_db
        rp, rn, rrx = self.reference.on(f)
        if self.input_kind == "noise":
            return f, noise_gain_db(p, rp)
        return f, station_gain_db(p, n, np.asarray(received, bool), rp, rn, rrx)

    def update(self, t_s: float, refresh: int, freqs_hz: Sequence[float], power_dbfs: Sequence[float],
               noise_dbfs: Sequence[float], received: Sequence[bool],
               stored_sweep_id: int | None = None) -> TuneFrame:
        """Measure one refresh and return what to show."""
        f, g = self.curve(freqs_hz, power_dbfs, noise_dbfs, received)
        self._times.append(float(t_s))
        rate = None
        if len(self._times) >= 2 and self._times[-1] > self._times[0]:
            rate = (len(self._times) - 1) / (self._times[-1] - self._times[0])
        measures = hint = None
        if np.count_nonzero(np.isfinite(g)) >= 2:
            measures = measure_curve(f, g, self.target_hz, self.stations_hz)
            if better_than(measures, self.best.measures if self.best else None):
                self.best = KeptCurve(float(t_s), f, g, measures)
            fit = plan = None
            if self.fit_worker is not None:
                if self._last_fit_s is None or t_s - self._last_fit_s >= self.fit_every_s:
                    self.fit_worker.offer(f, g)
                    self._last_fit_s = float(t_s)
                fit, plan = self.fit_worker.latest()
            hint = hint_for(measures, fit, plan)
        return TuneFrame(float(t_s), int(refresh), f, g, measures, self.best, hint, rate, stored_sweep_id,
                         self.input_kind, self.stations_hz)
