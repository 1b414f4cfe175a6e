"""Figure of one station's C/N over time (PNG). The only history module importing matplotlib.

One line per configuration (markers and line styles differ, so it reads in greyscale; colours
from the Okabe-Ito palette, Okabe & Ito 2008); sweeps where the station was not detected are
drawn as open markers at their measured C/N, or on a floor line below the data when not
measurable (P did not exceed N).
Horizontal guides mark the detection margin and the listenable thresholds.
"""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from analysis.errors import BadParameterError
from analysis.history.series import StationHistory
from analysis.thresholds import LISTENABLE_MONO_CN_DB, LISTENABLE_STEREO_CN_DB

_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00")
_MARKERS = ("o", "s", "^", "D", "v", "P")
_LINES = ("-", "--", ":", "-.", (0, (5, 1, 1, 1)), (0, (1, 2)))


def _utc(text: str) -> datetime:
    t = text.strip()
    stamp = datetime.fromisoformat(t[:-1] + "+00:00" if t.endswith("Z") else t)
    return stamp if stamp.tzinfo else stamp.replace(tzinfo=timezone.utc)


def plot_history(history: StationHistory, path: str | Path, dpi: int = 120) -> Path:
    """Write the C/N-over-time figure to ``path`` (PNG) and return the path.

    Raises :class:`BadParameterError` when ``path`` does not end in ``.png``.
    """
    out = Path(path)
    if out.suffix.lower() != ".png":
        raise BadParameterError(f"plot file {out} must end in .png (the figure is written as PNG)")
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.dates as mdates
    from matplotlib.figure import Figure

    fig = Figure(figsize=(10, 4.8), layout="constrained")
    ax = fig.subplots()
    finite = np.concatenate([s.cn_db[np.isfinite(s.cn_db)] for s in history.series] or [np.zeros(0)])
    floor = min(0.0, float(finite.min()) - 2.0) if finite.size else 0.0  # where "not measurable" is drawn
    margin = history.series[0].detection_margin_db if history.series else 3.0
    for k, s in enumerate(history.series):
        times = [_utc(t) for t in s.started_utc]
        colour, marker, line = _COLOURS[k % 6], _MARKERS[k % 6], _LINES[k % 6]
        cn = np.where(np.isfinite(s.cn_db), s.cn_db, floor)
        ax.plot(times, cn, linestyle=line, color=colour, linewidth=1.2, marker=marker, markersize=5,
                label=s.configuration)
        missed = ~np.asarray(s.detected, bool)
        ax.plot([t for t, m in zip(times, missed) if m], cn[missed], linestyle="none", marker=marker,
                markerfacecolor="white", color=colour, markersize=5)
    ax.axhline(floor, color="0.8", linewidth=0.8)
    for level, text, style in ((margin, f"detected {margin:g} dB", ":"),
                               (LISTENABLE_MONO_CN_DB, f"listenable mono {LISTENABLE_MONO_CN_DB:g} dB", "--"),
                               (LISTENABLE_STEREO_CN_DB, f"listenable stereo {LISTENABLE_STEREO_CN_DB:g} dB", "-.")):
        ax.axhline(level, color="0.45", linestyle=style, linewidth=0.9)
        ax.annotate(text, xy=(1.0, level), xycoords=("axes fraction", "data"), xytext=(-4, 2),
                    textcoords="offset points", ha="right", va="bottom", fontsize=8, color="0.3")
    freq = history.series[0].freq_hz if history.series else history.station_hz
    ax.set_title(f"C/N of the station at {freq / 1e6:.2f} MHz over time ({history.input})")
    ax.set_ylabel("C/N in the channel, dB")
    ax.set_xlabel("time (UTC)")
    ax.set_ylim(bottom=floor - 1.5)
    locator = mdates.AutoDateLocator()
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    ax.grid(True, alpha=0.3)
    ax.legend(title="open marker: not detected; on the floor line: not measurable", fontsize=8, title_fontsize=8, loc="upper left")
    try:
        fig.savefig(out, dpi=dpi)
    except OSError as exc:
        raise BadParameterError(f"cannot write the plot {out}: {exc.strerror or exc}") from exc
    return out
