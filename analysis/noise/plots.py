"""Figures of a noise result: noise figures against frequency, and Fa beside ITU-R P.372.

The only module of the noise analysis that imports matplotlib (Agg canvas, no pyplot state).
Series are told apart by marker and line style as well as by colour, and the colours differ
in lightness, so the figure survives greyscale printing.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from analysis.noise.workflow import NoiseResult
from analysis.noise.outside import ENVIRONMENTS, decile_fa_db, median_fa_db
from survey.text import plot_label

# Dark to light so that greyscale keeps them apart; each also has its own marker / dash.
_NF_SERIES = (
    ("receiver_nf_db", "receiver alone", "#1b1b1b", "s", "-"),
    ("system_nf_db", "preamp + receiver", "#2f6db5", "^", "--"),
    ("preamp_nf_db", "preamp (second-stage corrected)", "#d08a1e", "o", "-."),
    ("preamp_nf_terminated_db", "preamp (terminated ratio)", "#9a9a9a", "x", ":"),
)
_ENV_STYLE = {
    "city": ("#1b1b1b", "-"),
    "residential": ("#444444", "--"),
    "rural": ("#6e6e6e", "-."),
    "quiet rural": ("#989898", ":"),
    "galactic": ("#5b8fd0", (0, (5, 2, 1, 2, 1, 2))),
}


def plot_noise(result: NoiseResult, path: str | Path, dpi: int = 120) -> Path:
    """Write a two-panel PNG: NF vs frequency (top) and measured Fa vs P.372 curves (bottom).

    Parameters
    ----------
    result : NoiseResult
        From :func:`analysis.noise.workflow.analyse_noise`.
    path : str or Path
        Output PNG file.

    Returns
    -------
    Path
        The file written.
    """
    out = Path(path)
    f_mhz = result.freqs_hz.astype(float) / 1e6
    fig = Figure(figsize=(8.0, 8.5), layout="constrained")
    FigureCanvasAgg(fig)
    ax_nf, ax_fa = fig.subplots(2, 1, sharex=True)
    plotted = False
    for key, label, colour, marker, dash in _NF_SERIES:
        y = result.columns[key]
        if not np.any(np.isfinite(y)):
            continue
        plotted = True
        ax_nf.plot(f_mhz, y, color=colour, marker=marker, linestyle=dash, markersize=4, markevery=3, label=label)
        if key == "preamp_nf_db":
            u = result.columns["preamp_nf_uncertainty_db"]
            ax_nf.fill_between(f_mhz, y - u, y + u, color=colour, alpha=0.18, linewidth=0,
                               label="preamp NF ±1 standard uncertainty")
    ax_nf.set_ylabel("noise figure (dB)")
    ax_nf.set_title(f"Noise figure: '{plot_label(result.receiver)}' and '{plot_label(result.system)}'"
                    if result.system else f"Noise figure: '{plot_label(result.receiver)}'")
    ax_nf.grid(True, color="#dddddd")
    if plotted:
        ax_nf.legend(fontsize="small")
    else:
        ax_nf.text(0.5, 0.5, "no noise figure measured", ha="center", va="center", transform=ax_nf.transAxes)

    span = np.linspace(max(f_mhz.min(), 0.3), min(f_mhz.max(), 250.0), 50) if f_mhz.size else np.zeros(0)
    for name in ENVIRONMENTS:
        colour, dash = _ENV_STYLE[name]
        ax_fa.plot(span, median_fa_db(span * 1e6, name), color=colour, linestyle=dash, linewidth=1.2,
                   label=f"P.372 {name} (median)")
        if name == "galactic":
            band = decile_fa_db(span * 1e6, name)
            if band is not None:
                ax_fa.fill_between(span, band[0], band[1], color=colour, alpha=0.12, linewidth=0,
                                   label="P.372 galactic deciles")
    fa = result.columns["outside_fa_db"]
    if np.any(np.isfinite(fa)):
        occ = result.columns["occupied"] == 1
        ax_fa.plot(f_mhz[~occ], fa[~occ], linestyle="none", marker="o", markersize=4, color="#d08a1e",
                   markeredgecolor="#1b1b1b", label="measured Fa (free channels)")
        if np.any(occ):
            ax_fa.plot(f_mhz[occ], fa[occ], linestyle="none", marker="x", markersize=5, color="#1b1b1b",
                       label="measured Fa (station channels, local floor)")
    else:
        ax_fa.text(0.5, 0.9, "outside noise not measured", ha="center", va="center", transform=ax_fa.transAxes)
    ax_fa.set_xlabel("frequency (MHz)")
    ax_fa.set_ylabel("Fa (dB above kT0b)")
    ax_fa.set_title("Outside noise beside ITU-R P.372")
    ax_fa.grid(True, color="#dddddd")
    ax_fa.legend(fontsize="x-small", ncol=3, loc="upper center", bbox_to_anchor=(0.5, -0.16))
    fig.savefig(out, dpi=dpi)
    return out
