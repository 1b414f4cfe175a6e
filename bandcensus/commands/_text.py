"""Small wording helpers for printed output: plurals, paths, the C/N label.

Command-line only (the library never prints). Every command says ``C/N`` for the
carrier-to-noise ratio; :data:`CN_EXPLAINED` is the one sentence that says what it is.
"""

from __future__ import annotations

import os
from pathlib import Path

#: Primary label of the carrier-to-noise ratio in tables and text.
CN_LABEL = "C/N"
#: One sentence, printed once (help text, --explain, report), saying what C/N is.
CN_EXPLAINED = (
    "C/N is the carrier-to-noise ratio in the channel bandwidth, (P - N)/N in dB; some call it SNR, "
    "but it is not the audio signal-to-noise ratio."
)
#: Said beside levels when no calibration was given.
UNCALIBRATED_NOTE = "Levels are in dBFS (relative to the receiver's full scale): no calibration given."


def plural(count: int, word: str, plural_form: str | None = None) -> str:
    """``"1 sweep"``, ``"0 sweeps"``, ``"2 sweeps"``; ``plural_form`` for irregular words.

    >>> plural(1, "sweep"), plural(3, "sweep"), plural(2, "match", "matches")
    ('1 sweep', '3 sweeps', '2 matches')
    """
    n = int(count)
    return f"{n} {word if n == 1 else (plural_form or word + 's')}"


def display_path(path: str | os.PathLike, cwd: str | os.PathLike | None = None) -> str:
    """``path`` relative to the current folder when that is shorter, else absolute.

    A path outside the current folder is written with ``..`` only when still shorter than the
    absolute form. Never fails: a path on another drive (no relative form) stays absolute.
    """
    absolute = Path(os.path.abspath(os.fspath(path)))
    base = os.path.abspath(os.fspath(cwd)) if cwd is not None else os.getcwd()
    try:
        relative = os.path.relpath(absolute, base)
    except ValueError:  # another drive on Windows
        return str(absolute)
    return relative if len(relative) < len(str(absolute)) else str(absolute)
