"""Figure of a measured passband: points, fit, target band, -3 dB line and the stagger plan.

Greyscale-safe: every curve has its own line style and marker, the target band is hatched as
well as shaded. matplotlib is imported here only, with the non-interactive Agg backend.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from analysis.errors import AnalysisError


def plot_passband(report, path: str | Path, title: str | None = None) -> Path:
    """Draw ``report`` (an :class:`analysis.passband.fit.PassbandReport`) to a PNG at ``path``.

    The stagger plan's exact response is drawn at the fitted peak gain plus its peak-gain change
    (the cost of the wider band at a fixed gain-bandwidth per stage).
    """
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError as exc:  # pragma: no cover - matplotlib is a dependency
        raise AnalysisError("plotting needs matplotlib; install it with 'pip install matplotlib'") from exc

    fit, cov, plan, curve = report.fit, report.coverage, report.plan, report.curve
    f_pts = np.asarray(curve.freqs_hz, dtype=np.float64)
    lo_t, hi_t = cov.target_hz
    f_lo = min(f_pts.min(), lo_t, fit.edges_6db_hz[0] if np.isfinite(fit.edges_6db_hz[0]) else lo_t)
    f_hi = max(f_pts.max(), hi_t, fit.edges_6db_hz[1] if np.isfinite(fit.edges_6db_hz[1]) else hi_t)
    pad = 0.05 * (f_hi - f_lo)
    grid = np.linspace(f_lo - pad, f_hi + pad, 2000)
    unit = "dB (relative)" if curve.relative else "dB"

    fig, ax = plt.subplots(figsize=(8.0, 4.8), dpi=110)
    try:
        ax.axvspan(lo_t / 1e6, hi_t / 1e6, facecolor="0.92", edgecolor="0.75", hatch="//", linewidth=0.0,
                   label=f"target {lo_t / 1e6:g}-{hi_t / 1e6:g} MHz")
        ax.plot(f_pts / 1e6, curve.gain_db, linestyle="none", marker="o", markersize=4 if curve.dense else 6,
                markerfacecolor="white", markeredgecolor="black", label=f"measured ({curve.source})")
        ax.plot(grid / 1e6, fit.response_db(grid), color="black", linestyle="-", linewidth=1.6,
                label=f"fit: {fit.n_circuits} tuned circuit(s), {fit.shape}")
        ax.axhline(fit.peak_gain_db - 3.0103, color="0.3", linestyle=":", linewidth=1.2, label="-3 dB")
        change = plan.peak_gain_change_db or 0.0
        ax.plot(grid / 1e6, plan.response_db(grid) + fit.peak_gain_db + change, color="0.35",
                linestyle="--", linewidth=1.4, marker="s", markevery=200, markersize=4,
                label=f"stagger plan ({plan.n_circuits} circuits, {change:+.1f} dB peak gain)")
        st = np.asarray(cov.uncovered_stations_hz, dtype=np.float64)
        if st.size:
            ax.plot(st / 1e6, fit.response_db(st), linestyle="none", marker="x", color="black", markersize=7,
                    label="stations outside -3 dB")
        ymax = max(fit.peak_gain_db, float(np.nanmax(curve.gain_db))) + 3.0
        ymin = max(min(float(np.nanmin(curve.gain_db)), fit.peak_gain_db + change - 10.0) - 3.0,
                   fit.peak_gain_db - 60.0)
        ax.set_ylim(ymin, ymax)
        ax.set_xlabel("frequency (MHz)")
        ax.set_ylabel(f"gain, {unit}")
        ax.set_title(title or f"Preamp passband from {curve.source}: {fit.bw_3db_hz / 1e6:.2f} MHz at -3 dB "
                     f"around {fit.peak_hz / 1e6:.2f} MHz")
        ax.grid(True, color="0.85", linewidth=0.6)
        ax.legend(fontsize=7, loc="upper right", framealpha=0.9)
        out = Path(path)
        fig.tight_layout()
        fig.savefig(out, format="png")
    finally:
        plt.close(fig)
    return out
