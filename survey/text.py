"""Labels shown to people: stored verbatim, displayed without markup or control characters.

Labels (configuration names, SigMF descriptions, scene names) come from users and from foreign
files. They are stored exactly as given; only their *display* is made safe:

* :func:`plain_text` removes C0 and C1 control characters (ECMA-48 / ISO 6429: U+0000-U+001F,
  U+007F-U+009F), so a label cannot move the cursor, recolour the terminal or hide text;
  each removed character becomes ``?`` (so the label shown still differs from a clean one).
* :func:`terminal_label` also escapes rich console markup (``[bold]``, ``[/]``), so that the
  label shown is the label stored.
* :func:`plot_label` also escapes matplotlib mathtext: ``$`` becomes ``\\$``, so a label such as
  ``$\\undefinedcmd{x}$`` is drawn as written instead of failing to render.

The HTML report escapes with :func:`html.escape` after :func:`plain_text`.
"""

from __future__ import annotations

import re

_CONTROLS = re.compile("[\x00-\x1f\x7f-\x9f]")
_CONTROLS_BUT_LAYOUT = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")


def plain_text(text: object, keep_layout: bool = False) -> str:
    """``text`` as a string with every C0/C1 control character replaced by ``?``.

    ``keep_layout`` keeps tab, line feed and carriage return (for multi-line text in HTML).
    """
    return (_CONTROLS_BUT_LAYOUT if keep_layout else _CONTROLS).sub("?", str(text))


def terminal_label(text: object) -> str:
    """``text`` safe to print through rich: no control characters, markup escaped."""
    from rich.markup import escape

    return escape(plain_text(text))


def plot_label(text: object) -> str:
    """``text`` safe for a matplotlib title or legend: no control characters, ``$`` escaped."""
    return plain_text(text).replace("$", r"\$")


def html_label(text: object) -> str:
    """``text`` safe inside HTML text or an attribute value: no control characters (tab and line
    breaks kept), ``&<>"'`` escaped."""
    import html

    return html.escape(plain_text(text, keep_layout=True), quote=True)


__all__ = ["html_label", "plain_text", "plot_label", "terminal_label"]
