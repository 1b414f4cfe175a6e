"""Figures of an A/B comparison (PNG). The only module of the comparison that imports matplotlib.

Three panels sharing the frequency axis (MHz):

1. C/N of both configurations per compared item (station, or raster channel with
   ``--channels``; base: open circles, test: filled squares, joined by a dotted stem; triangles
   mark stations gained or lost), with the mono and stereo listenable thresholds;
2. delta C/N per item (test minus base) as bars with their confidence intervals, hatched
   where the verdict is improved or worse;
3. gain (ratio of P - N) and noise rise (ratio of N) per item.

Greyscale- and colour-blind-safe: the series differ by marker, line style and hatching, and
the colours (blue / orange from the Okabe-Ito palette, Okabe & Ito 2008) are only a bonus.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from analysis.compare.core import Comparison
from analysis.errors import BadParameterError
from survey.text import plot_label

_BLUE = "#0072B2"
_ORANGE = "#E69F00"
_GREY = "0.35"


def _col(result: Comparison, name: str) -> np.ndarray:
    return np.asarray([np.nan if getattr(c, name) is None else getattr(c, name) for c in result.items], float)


def plot_comparison(result: Comparison, path: str | Path, dpi: int = 120) -> Path:
    """Write the comparison figure to ``path`` (PNG) and return the path.

    Raises :class:`BadParameterError` when ``path`` does not end in ``.png``.
    """
    out = Path(path)
    if out.suffix.lower() != ".png":
        raise BadParameterError(f"plot file {out} must end in .png (the figure is written as PNG)")
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    f_mhz = np.asarray([c.freq_hz for c in result.items], float) / 1e6
    order = np.argsort(f_mhz)
    f_mhz = f_mhz[order]

    def col(name: str) -> np.ndarray:
        return _col(result, name)[order]

    base_cn, test_cn = col("base_cn_db"), col("test_cn_db")
    delta, lo, hi = col("delta_cn_db"), col("ci_low_db"), col("ci_high_db")
    gain, rise = col("gain_db"), col("noise_rise_db")
    verdicts = [result.items[i].verdict for i in order]

    fig = Figure(figsize=(11, 9.5), layout="constrained")
    ax1, ax2, ax3 = fig.subplots(3, 1, sharex=True)
    fig.suptitle(
        f"'{plot_label(result.test)}' (test) against '{plot_label(result.base)}' (base): C/N per {result.unit}, "
        f"{result.n_base_sweeps} + {result.n_test_sweeps} sweeps, {'paired' if result.paired else 'unpaired'}"
    )

    both = np.isfinite(base_cn) & np.isfinite(test_cn)
    ax1.vlines(f_mhz[both], base_cn[both], test_cn[both], colors=_GREY, linestyles=":", linewidth=1)
    ax1.plot(f_mhz, base_cn, linestyle="none", color=_BLUE, marker="o", markerfacecolor="white",
             label=f"base: {plot_label(result.base)}")
    ax1.plot(f_mhz, test_cn, linestyle="none", color=_ORANGE, marker="s", label=f"test: {plot_label(result.test)}")
    listen = result.summary["listenable"]
    for level, what, style in ((listen["mono_cn_db"], "mono", ":"), (listen["stereo_cn_db"], "stereo", "--")):
        ax1.axhline(level, color=_GREY, linestyle=style, linewidth=1,
                    label=f"listenable {what} from {level:g} dB")
    gained = np.asarray([v == "gained" for v in verdicts])
    lost = np.asarray([v == "lost" for v in verdicts])
    if gained.any():
        ax1.plot(f_mhz[gained], test_cn[gained], linestyle="none", marker="^", markersize=10,
                 color="black", markerfacecolor="none", label="gained (detected only with test)")
    if lost.any():
        ax1.plot(f_mhz[lost], base_cn[lost], linestyle="none", marker="v", markersize=10,
                 color="black", markerfacecolor="none", label="lost (detected only with base)")
    ax1.set_ylabel("C/N = (P - N)/N, dB")
    ax1.legend(loc="best", fontsize="small")
    ax1.grid(True, alpha=0.3)

    ok = np.isfinite(delta)
    width = 0.6 * (np.min(np.diff(f_mhz)) if f_mhz.size > 1 else 0.1)
    hatches = ["//" if v == "improved" else ("xx" if v == "worse" else "") for v in verdicts]
    for hatch in dict.fromkeys(hatches):  # one call per hatching (the same bars, far fewer artists)
        same = ok & np.asarray([h == hatch for h in hatches], bool)
        if same.any():
            ax2.bar(f_mhz[same], delta[same], width=width, color="0.8", edgecolor="black", hatch=hatch,
                    linewidth=0.6)
    has_ci = ok & np.isfinite(lo) & np.isfinite(hi)
    if has_ci.any():
        ax2.errorbar(f_mhz[has_ci], delta[has_ci], yerr=[delta[has_ci] - lo[has_ci], hi[has_ci] - delta[has_ci]],
                     fmt="none", ecolor="black", capsize=2, linewidth=1,
                     label=f"{100 * result.thresholds['confidence']:g}% interval")
    ax2.axhline(0.0, color="black", linewidth=0.8)
    m = result.thresholds["min_change_db"]
    ax2.axhspan(-m, m, color="0.9", zorder=0, label=f"+/-{m:g} dB (unchanged when the interval lies within)")
    ax2.set_ylabel("delta C/N (test - base), dB")
    ax2.legend(loc="best", fontsize="small", title="hatched: // improved, xx worse", title_fontsize="small")
    ax2.grid(True, alpha=0.3)

    ax3.plot(f_mhz, gain, linestyle="-", marker="D", color=_BLUE, label="gain: ratio of P - N")
    ax3.plot(f_mhz, rise, linestyle="-.", marker="x", color=_ORANGE, label="noise rise: ratio of N")
    ax3.axhline(0.0, color="black", linewidth=0.8)
    ax3.set_ylabel("ratio test/base, dB")
    ax3.set_xlabel(f"{result.unit} frequency, MHz")
    ax3.legend(loc="best", fontsize="small")
    ax3.grid(True, alpha=0.3)

    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, dpi=dpi)
    return out
