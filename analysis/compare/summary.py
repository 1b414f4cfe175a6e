"""Counts and plain conclusions of a comparison: verdict counts equal to the rows, listenable items,
and what the noise rise says, compared at the same frequencies as the gain."""

from __future__ import annotations

import numpy as np

#: C/N (dB) from which FM mono reception is counted listenable: a little above the FM
#: demodulator's threshold of about 10 dB (common practice, no source).
LISTENABLE_MONO_CN_DB = 12.0
#: C/N (dB) from which stereo reception is counted listenable: the stereo difference channel
#: needs roughly 20 dB more than mono for the same audio quality (common practice, no source).
LISTENABLE_STEREO_CN_DB = 30.0
THRESHOLD_SOURCE = "common practice, no source"

#: Summary count key of each verdict.
COUNT_KEYS = {"improved": "helped", "worse": "hurt", "unchanged": "unchanged", "undetermined": "undetermined",
              "gained": "gained", "lost": "lost", "not received": "not_received"}


def noise_rise_explanation(gain_db: float | None, rise_db: float | None, n_items: int, unit: str = "item") -> str:
    """What the noise rise says, from the median gain and the median noise rise over the SAME items.

    With ``delta C/N = G - R``: a floor that rises as much as the signals (``R ~ G``) means
    noise from ahead of the receiver (outside noise or the preamp's own noise) dominates and
    more gain cannot help; ``R`` well below ``G`` means the receiver's own noise dominated and
    the test configuration lifts the signals above it; ``R > G`` with a floor that rose means the
    test chain adds noise beyond its gain; ``G`` below 0 with a floor that did not rise means the
    test chain attenuates the signals (a passband that misses them) while the receiver's own
    noise stays, so C/N falls. The 1 dB margins are common practice, no source.
    """
    if gain_db is None or rise_db is None:
        return "not available: no item with both a gain and a noise rise"
    head = (f"at the {n_items} {unit}{'' if n_items == 1 else 's'} with both measured, median gain {gain_db:+.1f} dB and median noise rise "
            f"{rise_db:+.1f} dB: ")
    if gain_db < -1.0 and rise_db <= 1.0:
        return head + (f"the test chain attenuates the signals ({gain_db:+.1f} dB) and the floor falls less "
                       "because the receiver's own noise stays: C/N drops; check that its passband covers "
                       "these stations")
    if rise_db > gain_db + 1.0:
        return head + ("the floor rose more than the signals; the test chain adds noise beyond its gain "
                       "(oscillation, supply noise or overload): check it")
    if rise_db >= gain_db - 1.0:
        return head + ("the floor rose about as much as the signals, so noise from ahead of the receiver "
                       "(outside noise or the preamp's own noise) dominates; more gain will not help")
    return head + (f"the floor rose {gain_db - rise_db:.1f} dB less than the signals: the receiver's own noise "
                   "dominated the base configuration and the test configuration lifts signals above it")


def _median(values: list[float]) -> float | None:
    return float(np.median(values)) if values else None


def summarise(result) -> dict:
    """Integer counts per verdict (``helped``, ``hurt``, ``unchanged``, ``undetermined``, ``gained``,
    ``lost``; ``not_received`` for raster channels), the frequencies behind them, items listenable
    before and after, and the noise-rise explanation. Counts add up to the number of rows."""
    items = result.items
    counts = {key: 0 for key in COUNT_KEYS.values()}
    freqs: dict[str, list[int]] = {key: [] for key in COUNT_KEYS.values()}
    for c in items:
        counts[COUNT_KEYS[c.verdict]] += 1
        freqs[COUNT_KEYS[c.verdict]].append(c.freq_hz)
    if not counts["not_received"]:
        del counts["not_received"], freqs["not_received"]
    both = [c for c in items if c.gain_db is not None and c.noise_rise_db is not None
            and c.verdict != "not received"]
    empty = [c.noise_rise_db for c in items if c.verdict == "not received" and c.noise_rise_db is not None]

    def listenable(attr: str, threshold: float) -> int:
        return sum(getattr(c, attr) is not None and getattr(c, attr) >= threshold for c in items)

    return {
        **counts,
        "unit": result.unit,
        "names": {str(c.freq_hz): c.name for c in items if getattr(c, "name", None)},
        "rows": len(items),
        "frequencies_hz": freqs,
        "listenable": {
            "mono_cn_db": LISTENABLE_MONO_CN_DB, "stereo_cn_db": LISTENABLE_STEREO_CN_DB,
            "source": THRESHOLD_SOURCE,
            "mono_base": listenable("base_cn_db", LISTENABLE_MONO_CN_DB),
            "mono_test": listenable("test_cn_db", LISTENABLE_MONO_CN_DB),
            "stereo_base": listenable("base_cn_db", LISTENABLE_STEREO_CN_DB),
            "stereo_test": listenable("test_cn_db", LISTENABLE_STEREO_CN_DB),
        },
        "median_gain_db": _median([c.gain_db for c in both]),
        "median_noise_rise_db": _median([c.noise_rise_db for c in both]),
        "broadband_noise_rise_db": _median(empty),
        "unoccupied_channels": len(empty),
        "noise_source": noise_rise_explanation(_median([c.gain_db for c in both]),
                                               _median([c.noise_rise_db for c in both]), len(both), result.unit),
    }
