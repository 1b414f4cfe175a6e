"""Settings that must match (or only widen the uncertainty) before two sets of sweeps are compared."""

from __future__ import annotations

from operator import attrgetter

from analysis.errors import MismatchError
from survey.store import SweepRow


#: The settings compared, read from every sweep in one pass (a week holds tens of thousands).
_CHECKED = ("band", "channel_bw_hz", "gain_db", "sample_rate_hz", "fft_size", "dwell_s", "received_margin_db")


def _distinct(rows: list[SweepRow]) -> set[tuple]:
    """The distinct combinations of the :data:`_CHECKED` settings among ``rows``."""
    return set(map(attrgetter(*_CHECKED), rows))


def _values(rows: list[SweepRow] | set[tuple], name: str) -> list:
    """Sorted distinct values of setting ``name`` (None last) of sweeps, or of their :func:`_distinct`."""
    if isinstance(rows, set):
        k = _CHECKED.index(name)
        found = {combo[k] for combo in rows}
    else:
        found = set(map(attrgetter(name), rows))
    return sorted(found, key=lambda v: (v is None, v))


def _fmt(values: list, unit: str = "") -> str:
    def one(v):
        if v is None:
            return "auto (tuner AGC)"
        return f"{v:g}{unit}" if isinstance(v, (int, float)) else str(v)
    return " / ".join(one(v) for v in values)


def settings_warnings(rows_b: list[SweepRow], rows_t: list[SweepRow], base: str, test: str) -> list[str]:
    """Refuse comparisons that do not line up; return warnings for differences that only widen
    the uncertainty.

    Raises :class:`MismatchError` when the sweeps differ in band plan or channel bandwidth
    (channel powers then measure different things).
    """
    seen_b, seen_t = _distinct(rows_b), _distinct(rows_t)
    everything = seen_b | seen_t
    for name, what, unit, remedy in (
        ("band", "band plan", "", "measure both with the same --band, or select sweeps of one band plan"
         " with --since/--until"),
        ("channel_bw_hz", "channel bandwidth", " Hz", "measure both with the same channel bandwidth,"
         " or select matching sweeps with --since/--until"),
    ):
        if len(_values(everything, name)) > 1:
            raise MismatchError(
                f"cannot compare: {what} differs ('{base}': {_fmt(_values(seen_b, name), unit)}; "
                f"'{test}': {_fmt(_values(seen_t, name), unit)}); {remedy}"
            )
    notes = []
    for name, what, unit, effect in (
        ("gain_db", "receiver gain", " dB", "the receiver's own noise and overload margin differ, so the "
         "change includes the receiver's change as well as the configuration's"),
        ("sample_rate_hz", "sample rate", " Hz", "hop plans and filter edges differ; noise-floor estimates "
         "may shift by a few tenths of a dB"),
        ("fft_size", "FFT size", "", "the noise-floor estimator sees a different resolution"),
        ("dwell_s", "dwell", " s", "measurement scatter differs between the two"),
        ("received_margin_db", "detection margin", " dB", "'received' means different things for the two"),
    ):
        vb, vt = _values(seen_b, name), _values(seen_t, name)
        if vb != vt or len(vb) > 1:
            notes.append(f"{what} differs: '{base}' {_fmt(vb, unit)}, '{test}' {_fmt(vt, unit)}; {effect}")
    return notes


