"""Named carrier-to-noise thresholds and the words shown for them.

``C/N`` is the carrier-to-noise ratio in the channel bandwidth, ``10 log10((P - N)/N)`` dB: the
RF quantity this tool measures (some call it SNR; it is not the audio signal-to-noise ratio a
restorer measures at the loudspeaker). The words, in rising order:

* ``detected``: C/N at or above the detection margin of the sweep (``received_margin_db``,
  3 dB by default): a carrier is there;
* ``listenable mono``: C/N at or above :data:`LISTENABLE_MONO_CN_DB`;
* ``listenable stereo``: C/N at or above :data:`LISTENABLE_STEREO_CN_DB`.

JSON keys use the same words with underscores (``detected``, ``listenable_mono``,
``listenable_stereo``).

Sources
-------
* The FM demodulator threshold lies near 10 dB carrier-to-noise in the IF bandwidth; below it
  clicks and capture of noise make speech unusable (textbook result, e.g. Carlson,
  *Communication Systems*, FM threshold chapter; from memory). 12 dB keeps a 2 dB margin above
  it: common practice, no source.
* Stereo reception costs about 20 dB of audio signal-to-noise against mono at the same
  carrier-to-noise (the difference signal rides on the 38 kHz subcarrier, where the FM noise
  spectrum rises with frequency; from memory). Hence 12 + 20 = 32 dB for stereo: common
  practice, no source.
"""

from __future__ import annotations

import math

#: C/N (dB) at or above which mono FM reception is called listenable (common practice, no source).
LISTENABLE_MONO_CN_DB = 12.0
#: C/N (dB) at or above which stereo FM reception is called listenable (common practice, no source).
LISTENABLE_STEREO_CN_DB = 32.0
#: Where the two values above come from, for tables, JSON and reports.
LISTENABLE_SOURCE = "common practice, no source"

#: Reception words from weakest to strongest (see :func:`reception_word`).
RECEPTION_WORDS = ("not detected", "detected", "listenable mono", "listenable stereo")


def reception_word(cn_db: float | None, detection_margin_db: float = 3.0) -> str:
    """The reception word for a C/N in dB: one of :data:`RECEPTION_WORDS`.

    ``None`` or NaN (no measurable carrier) is ``"not detected"``.

    >>> reception_word(35.0), reception_word(15.0), reception_word(5.0), reception_word(1.0)
    ('listenable stereo', 'listenable mono', 'detected', 'not detected')
    """
    if cn_db is None or not math.isfinite(cn_db) or cn_db < detection_margin_db:
        return RECEPTION_WORDS[0]
    if cn_db >= LISTENABLE_STEREO_CN_DB:
        return RECEPTION_WORDS[3]
    if cn_db >= LISTENABLE_MONO_CN_DB:
        return RECEPTION_WORDS[2]
    return RECEPTION_WORDS[1]


def reception_flags(cn_db: float | None, detection_margin_db: float = 3.0) -> dict[str, bool]:
    """JSON-ready flags ``{"detected", "listenable_mono", "listenable_stereo"}`` for one C/N.

    Each flag is a threshold test of its own (a stereo-listenable station is also mono-listenable
    and detected).
    """
    ok = cn_db is not None and math.isfinite(cn_db)
    return {
        "detected": bool(ok and cn_db >= detection_margin_db),
        "listenable_mono": bool(ok and cn_db >= LISTENABLE_MONO_CN_DB),
        "listenable_stereo": bool(ok and cn_db >= LISTENABLE_STEREO_CN_DB),
    }
