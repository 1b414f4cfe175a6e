"""Terminal view of a tuning session: a text plot of the gain curve and its measures (rich).

Plain characters only (works over SSH and in a text capture): the current curve ``█``, the best
curve so far ``·``, the -3 dB level of the current peak as a dotted row, and under the plot the
target band ``═``, the peak ``^`` and the -3 dB edges ``[`` ``]``.
"""

from __future__ import annotations

import math

import numpy as np

from analysis.tuning.tracker import TuneFrame

PLOT_ROWS = 16
DB_PER_ROW = 1.25


def _mhz(hz: float | None, digits: int = 2) -> str:
    if hz is None or not math.isfinite(hz):
        return "beyond span"
    return f"{hz / 1e6:.{digits}f} MHz"


def plot_lines(frame: TuneFrame, width: int = 72) -> list[tuple[str, str]]:
    """The plot as ``(text, style)`` lines; ``width`` is the number of plot columns."""
    f, g = frame.freqs_hz, frame.gain_db
    ok = np.isfinite(g)
    if np.count_nonzero(ok) < 2:
        return [("(waiting for a curve)", "dim")]
    f0, f1 = float(f[ok][0]), float(f[ok][-1])
    cols = np.linspace(f0, f1, width)
    top_db = float(np.nanmax(g)) + 1.0
    if frame.best is not None:
        top_db = max(top_db, float(np.nanmax(frame.best.gain_db)) + 1.0)
    top_db = math.ceil(top_db)
    rows_db = top_db - DB_PER_ROW * np.arange(PLOT_ROWS)

    def column_rows(freqs, gains):
        okk = np.isfinite(gains)
        if np.count_nonzero(okk) < 2:
            return None
        if frame.input == "antenna":  # sparse station points: mark only their own columns
            out = np.full(width, -1)
            for fx, gx in zip(freqs[okk], gains[okk]):
                c = int(round((fx - f0) / (f1 - f0) * (width - 1)))
                if 0 <= c < width:
                    out[c] = int(np.clip(round((top_db - gx) / DB_PER_ROW), 0, PLOT_ROWS - 1))
            return out
        level = np.interp(cols, freqs[okk], gains[okk])
        return np.clip(np.round((top_db - level) / DB_PER_ROW), 0, PLOT_ROWS - 1).astype(int)

    grid = [[" "] * width for _ in range(PLOT_ROWS)]
    m = frame.measures
    if m is not None:
        r3 = int(np.clip(round((top_db - (m.peak_gain_db - 3.01)) / DB_PER_ROW), 0, PLOT_ROWS - 1))
        for c in range(0, width, 2):
            grid[r3][c] = "┈"
    if frame.best is not None:
        rows = column_rows(frame.best.freqs_hz, frame.best.gain_db)
        if rows is not None:
            for c, r in enumerate(rows):
                if r >= 0:
                    grid[r][c] = "·"
    rows = column_rows(f, g)
    for c, r in enumerate(rows):
        if r >= 0:
            grid[r][c] = "█"
    lines = []
    for k in range(PLOT_ROWS):
        label = f"{rows_db[k]:6.1f} dB │" if k % 2 == 0 else " " * 10 + "│"
        lines.append((label + "".join(grid[k]), ""))
    axis = ["─"] * width
    if m is not None:
        lo_t, hi_t = m.target_hz
        for c, fx in enumerate(cols):
            if lo_t <= fx <= hi_t:
                axis[c] = "═"
        for fx, mark in ((m.edge_low_hz, "["), (m.edge_high_hz, "]"), (m.peak_hz, "^")):
            if math.isfinite(fx) and f0 <= fx <= f1:
                axis[int(round((fx - f0) / (f1 - f0) * (width - 1)))] = mark
    lines.append((" " * 10 + "└" + "".join(axis), ""))
    ticks = [" "] * (width + 11)
    for fx in (f0, f1) + ((m.target_hz) if m else ()):
        c = 11 + int(round((fx - f0) / (f1 - f0) * (width - 1)))
        text = f"{fx / 1e6:.1f}"
        start = min(max(c - len(text) // 2, 11), width + 11 - len(text))
        if all(ch == " " for ch in ticks[max(start - 1, 0):start + len(text) + 1]):
            ticks[start:start + len(text)] = list(text)
    lines.append(("".join(ticks) + "  MHz", ""))
    return lines


def summary_lines(frame: TuneFrame, simulated: bool) -> list[tuple[str, str]]:
    """The measures under the plot as ``(text, style)`` lines."""
    out = []
    rate = "" if frame.refresh_rate_hz is None else f", {frame.refresh_rate_hz:.2f} refreshes/s"
    head = "SIMULATED " if simulated else ""
    out.append((f"{head}refresh {frame.refresh} at {frame.t_s:.1f} s{rate}   █ now  · best so far  "
                f"═ target  [ ] -3 dB edges  ^ peak", "bold"))
    m = frame.measures
    if m is None:
        out.append(("no curve yet: no channel measured against the reference", "yellow"))
        return out
    width = "beyond the span" if not math.isfinite(m.width_hz) else f"{m.width_hz / 1e6:.2f} MHz"
    out.append((f"peak {_mhz(m.peak_hz, 3)}  gain {m.peak_gain_db:.1f} dB   -3 dB edges {_mhz(m.edge_low_hz)} .. "
                f"{_mhz(m.edge_high_hz)}  width {width}", ""))
    out.append((f"target {m.target_hz[0] / 1e6:g}-{m.target_hz[1] / 1e6:g} MHz: "
                f"{100 * m.target_within_3db_fraction:.0f} % within 3 dB, least gain {m.min_gain_in_target_db:.1f} dB", ""))
    if frame.best is not None:
        b = frame.best.measures
        out.append((f"best so far (at {frame.best.t_s:.1f} s): {100 * b.target_within_3db_fraction:.0f} % within 3 dB, "
                    f"peak {_mhz(b.peak_hz)}", "cyan"))
    if frame.input == "antenna":
        inside = ", ".join(f"{s / 1e6:.1f}" for s in m.stations_inside_hz) or "none"
        outside = ", ".join(f"{s / 1e6:.1f}" for s in m.stations_outside_hz) or "none"
        out.append((f"stations in the passband: {inside} MHz; outside it: {outside} MHz", ""))
    if frame.hint is not None:
        out.append((f"hint: {frame.hint.text}", "green" if frame.hint.kind == "covered" else "yellow"))
    return out


def render(frame: TuneFrame, width: int, simulated: bool):
    """A rich renderable of the whole view for a console ``width`` characters wide."""
    from rich.text import Text

    text = Text()
    for line, style in plot_lines(frame, max(40, min(width - 17, 120))) + [("", "")] + summary_lines(frame, simulated):
        text.append(line + "\n", style=style or None)
    return text


class TerminalView:
    """Live view on standard output: redrawn in place on a terminal, one line per second otherwise."""

    def __init__(self, simulated: bool):
        from rich.console import Console

        self.console = Console(highlight=False)
        self.simulated = simulated
        self._live = None
        self._last_line_s: float | None = None

    def __enter__(self) -> "TerminalView":
        if self.console.is_terminal:
            from rich.live import Live

            self._live = Live(console=self.console, auto_refresh=False, transient=False)
            self._live.__enter__()
        return self

    def show(self, frame: TuneFrame) -> None:
        """Draw one refresh."""
        if self._live is not None:
            self._live.update(render(frame, self.console.width, self.simulated), refresh=True)
            return
        if self._last_line_s is None or frame.t_s - self._last_line_s >= 1.0:
            self._last_line_s = frame.t_s
            lines = summary_lines(frame, self.simulated)
            self.console.print(" | ".join(t for t, _ in lines[1:3]) if len(lines) > 2 else lines[-1][0],
                               markup=False, soft_wrap=True)

    def __exit__(self, *exc) -> None:
        if self._live is not None:
            self._live.__exit__(*exc)
            self._live = None
