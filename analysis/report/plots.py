"""Figures of the HTML report, as PNG bytes and ``data:`` URIs (nothing is fetched by the page).

The comparison, passband and noise figures are drawn by their own analyses' plot helpers
(:func:`analysis.compare.plots.plot_comparison`, :func:`analysis.passband.plots.plot_passband`,
:func:`analysis.noise.plots.plot_noise`); this module adds the overnight figures:

* the noise floor of every hop against time (``hops.floor_dbfs_hz``) and the C/N of the
  strongest and weakest received stations against time, base and test apart;
* a time-by-frequency image of C/N for each configuration.

matplotlib is imported here only, with the Agg canvas. Series differ by marker and line style
as well as by colour (Okabe-Ito blue and vermilion, Okabe & Ito 2008, "Color universal
design"); the image uses ``cividis``, whose lightness rises monotonically, so it prints in grey.
"""

from __future__ import annotations

import base64
import tempfile
from dataclasses import replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from analysis.channel_stats import masked_cn_db, utc_to_epoch_s
from analysis.report.build import OvernightSeries, Report

_BLUE = "#0072B2"
_VERMILION = "#D55E00"
_GREY = "0.35"
#: Resolution of the figures embedded in the page (dots per inch).
REPORT_DPI = 90


def png_data_uri(png: bytes) -> str:
    """A PNG as a ``data:image/png;base64,...`` URI (RFC 2397)."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def mpl_text(text: str) -> str:
    """User text made literal for matplotlib: ``$`` would start mathtext, so it is escaped."""
    return str(text).replace("\\", "\\\\").replace("$", r"\$")


def _via_file(draw) -> bytes:
    """Run ``draw(path)`` (a helper that writes a PNG file) and return the bytes written."""
    with tempfile.TemporaryDirectory(prefix="bandcensus-report-") as tmp:
        path = Path(tmp) / "figure.png"
        draw(path)
        return path.read_bytes()


def _figure():
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    def make(**kw):
        fig = Figure(**kw)
        FigureCanvasAgg(fig)
        return fig

    return make


def _save(fig) -> bytes:
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=REPORT_DPI)
    return buf.getvalue()


def comparison_png(report: Report) -> bytes:
    """C/N both ways, the change with intervals, gain and noise rise (the comparison's own figure)."""
    from analysis.compare.plots import plot_comparison

    cmp_ = replace(report.comparison, base=mpl_text(report.base), test=mpl_text(report.test))
    return _via_file(lambda p: plot_comparison(cmp_, p, dpi=REPORT_DPI))


def passband_png(report: Report) -> bytes:
    """Measured passband, fit, target band and stagger plan (the passband analysis's figure)."""
    from analysis.passband.plots import plot_passband

    return _via_file(lambda p: plot_passband(report.passband, p))


def noise_png(report: Report) -> bytes:
    """Noise figures against frequency and Fa beside ITU-R P.372 (the noise analysis's figure)."""
    from analysis.noise.plots import plot_noise

    nr = replace(report.noise, receiver=mpl_text(report.noise.receiver),
                 system=None if report.noise.system is None else mpl_text(report.noise.system))
    return _via_file(lambda p: plot_noise(nr, p, dpi=REPORT_DPI))


class _Clock:
    """Elapsed time since the first sweep, in minutes (spans up to 3 h) or hours."""

    def __init__(self, epoch_s: np.ndarray):
        t = np.asarray(epoch_s, np.float64)
        t = t[np.isfinite(t)]
        self.t0 = float(t.min()) if t.size else 0.0
        span = float(t.max() - t.min()) if t.size else 0.0
        self.scale, unit = (60.0, "min") if span <= 3 * 3600 else (3600.0, "h")
        start = datetime.fromtimestamp(self.t0, timezone.utc).strftime("%Y-%m-%d %H:%M:%S")
        self.label = f"time since {start} UTC, {unit}"

    def __call__(self, epoch_s) -> np.ndarray:
        return (np.asarray(epoch_s, np.float64) - self.t0) / self.scale


def _per_sweep_medians(sweep_ids: np.ndarray, *values: np.ndarray) -> list[np.ndarray]:
    """Median of each of ``values`` over the hops of each sweep, sweeps in ascending id order
    (one sort, then each sweep's slice; the hop count grows with the sweeps)."""
    order = np.argsort(sweep_ids, kind="stable")
    ids = sweep_ids[order]
    starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]]) if ids.size else np.zeros(0, np.int64)
    bounds = np.r_[starts, ids.size]
    out = []
    for v in values:
        v_sorted = np.asarray(v)[order]
        out.append(np.asarray([np.median(v_sorted[a:b]) for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist())]))
    return out


def overnight_png(series: OvernightSeries, base: str, test: str) -> bytes:
    """Two panels against UTC time: hop noise floors, and C/N of the strongest / weakest station."""
    fig = _figure()(figsize=(10, 6.6), layout="constrained")
    ax_f, ax_c = fig.subplots(2, 1, sharex=True)
    styles = {base: (_BLUE, "o", "white", "--"), test: (_VERMILION, "s", _VERMILION, "-")}
    clock = _Clock(utc_to_epoch_s([h.started_utc for h, _ in series.hops]
                                  + list(series.base.started_utc) + list(series.test.started_utc)))
    for label, role in ((base, "base"), (test, "test")):
        colour, marker, face, dash = styles[label]
        hops = [h for h, cfg in series.hops if cfg == label]
        if hops:
            t = clock(utc_to_epoch_s([h.started_utc for h in hops]))
            floor = np.asarray([h.floor_dbfs_hz for h in hops], np.float64)
            ax_f.plot(t, floor, linestyle="none", marker=marker, markersize=3, color=colour,
                      markerfacecolor=face, alpha=0.6, label=f"{role}: {mpl_text(label)}, each hop")
            med_t, med_f = _per_sweep_medians(np.asarray([h.sweep_id for h in hops], np.int64), t, floor)
            ax_f.plot(med_t, med_f, linestyle=dash, color=colour, linewidth=1.4,
                      label=f"{role}: median over the hops of each sweep")
    ax_f.set_ylabel("hop noise floor, dBFS/Hz")
    ax_f.set_title("Noise floor per hop against time")
    ax_f.grid(True, color="0.88")
    ax_f.legend(fontsize="small", ncol=2, loc="best")

    drawn = False
    for freq, kind, width in ((series.strongest_hz, "strongest", 1.6), (series.weakest_hz, "weakest", 1.0)):
        if freq is None:
            continue
        for role, label in (("base", base), ("test", test)):
            colour, marker, face, dash = styles[label]
            t, cn = series.cn_series(role, freq)
            if not np.any(np.isfinite(cn)):
                continue
            drawn = True
            ax_c.plot(clock(t), cn, linestyle=dash if kind == "strongest" else ":", linewidth=width,
                      marker=marker if kind == "strongest" else ("^" if role == "base" else "v"),
                      markersize=5, color=colour, markerfacecolor=face,
                      label=f"{kind} {freq / 1e6:.2f} MHz, {role}: {mpl_text(label)}")
    if not drawn:
        ax_c.text(0.5, 0.5, "no station received in half of the sweeps", ha="center", va="center",
                  transform=ax_c.transAxes)
    ax_c.set_ylabel("C/N, dB")
    ax_c.set_xlabel(clock.label)
    ax_c.set_title("C/N of the strongest and weakest received stations (gaps: not detected)")
    ax_c.grid(True, color="0.88")
    if drawn:
        ax_c.legend(fontsize="small", ncol=2, loc="best")
    return _save(fig)


def _edges(centres: np.ndarray, fallback: float) -> np.ndarray:
    """Cell edges around sorted centres (half-way between neighbours)."""
    c = np.asarray(centres, np.float64)
    if c.size == 1:
        return np.array([c[0] - fallback / 2, c[0] + fallback / 2])
    mid = (c[1:] + c[:-1]) / 2
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


#: Most sweeps drawn as image rows in a waterfall (more are thinned to every k-th sweep).
WATERFALL_MAX_ROWS = 720


def waterfall_png(series: OvernightSeries, base: str, test: str) -> bytes:
    """Time-by-frequency images of C/N, base above test, on one colour scale.

    Cells a sweep did not receive are left hatched rather than given a number.
    """
    fig = _figure()(figsize=(10, 6.4), layout="constrained")
    axes = fig.subplots(2, 1, sharex=True, sharey=True)
    cn_all = [masked_cn_db(m) for m in (series.base, series.test)]
    finite = np.concatenate([c[np.isfinite(c)] for c in cn_all]) if cn_all else np.zeros(0)
    vmin, vmax = (float(np.percentile(finite, 1)), float(np.percentile(finite, 99))) if finite.size else (0.0, 1.0)
    if vmax <= vmin:
        vmax = vmin + 1.0
    mesh = None
    clock = _Clock(utc_to_epoch_s(list(series.base.started_utc) + list(series.test.started_utc)))
    for ax, m, cn, role, label in zip(axes, (series.base, series.test), cn_all, ("base", "test"), (base, test)):
        from matplotlib.patches import Rectangle

        ax.add_patch(Rectangle((0, 0), 1, 1, transform=ax.transAxes, facecolor="white", edgecolor="0.7",
                               hatch="///", linewidth=0, zorder=0))
        t = utc_to_epoch_s(m.started_utc)
        if t.size == 0 or m.freqs_hz.size == 0:
            ax.text(0.5, 0.5, "no sweeps", ha="center", va="center", transform=ax.transAxes)
            continue
        order = np.argsort(t)
        step = max(1, -(-t.size // WATERFALL_MAX_ROWS))  # an image row per sweep up to the limit
        order = order[::step]
        spacing = float(np.median(np.diff(t[order]))) if order.size > 1 else 60.0
        y = clock(_edges(t[order], spacing))
        x = _edges(m.freqs_hz.astype(np.float64), 100e3) / 1e6
        mesh = ax.pcolormesh(x, y, np.ma.masked_invalid(cn[order]), cmap="cividis", vmin=vmin, vmax=vmax,
                             shading="flat", zorder=1)
        shown = f"{t.size} sweeps" if step == 1 else f"every {step}th of {t.size} sweeps"
        ax.set_title(f"{role}: {mpl_text(label)} ({shown}); hatched: not received")
        ax.set_ylabel(clock.label.replace("time since", "sweep start after"), fontsize="small")
    axes[-1].set_xlabel("channel frequency, MHz")
    if mesh is not None:
        fig.colorbar(mesh, ax=list(axes), label="C/N, dB", shrink=0.9)
    return _save(fig)


def render_figures(report: Report) -> dict[str, str]:
    """Every figure the report's data support, as ``{key: data URI}``.

    Keys: ``comparison``, ``passband``, ``noise``, ``overnight``, ``waterfall``; a key is
    missing when its section is not available.
    """
    out: dict[str, str] = {}
    if report.comparison is not None:
        out["comparison"] = png_data_uri(comparison_png(report))
    if report.passband is not None:
        out["passband"] = png_data_uri(passband_png(report))
    if report.noise is not None:
        out["noise"] = png_data_uri(noise_png(report))
    if report.series is not None:
        out["overnight"] = png_data_uri(overnight_png(report.series, report.base, report.test))
        out["waterfall"] = png_data_uri(waterfall_png(report.series, report.base, report.test))
    return out
