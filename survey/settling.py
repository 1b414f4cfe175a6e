"""Start-up transients of foreign captures: find the samples to leave out before measuring.

A receiver that starts recording while its gain or DC offset is still settling (the tuner's
gain loop, the converter's offset correction) delivers a first stretch whose power departs from
the rest. Replay cannot retune and discard samples like a live scan does, so it looks for the
stretch instead: the capture's opening is cut into segments, each segment's mean power is taken
in dB, and the leading run of segments whose power departs from the steady part's median by
more than ``threshold_sigma`` robust standard deviations (scaled median absolute deviation,
Hampel's identifier; Hampel 1974, Rousseeuw & Croux 1993) is the transient. The threshold is
floored at ``min_departure_db`` so that a very steady signal does not flag sub-0.1 dB wobbles.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Scale of the median absolute deviation to a normal standard deviation (1 / Phi^-1(3/4)).
MAD_TO_SIGMA = 1.4826


@dataclass(frozen=True)
class Transient:
    """A detected start-up transient: samples to skip and how far the power departed (dB)."""

    n_samples: int
    departure_db: float
    scatter_db: float


def segment_powers_db(samples: np.ndarray, segment: int) -> np.ndarray:
    """Mean power of consecutive ``segment``-long pieces of complex ``samples``, dB (full scale)."""
    n = (samples.size // segment) * segment
    p = np.mean(np.abs(samples[:n].reshape(-1, segment)) ** 2, axis=1)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.maximum(p, 1e-30))


def detect_startup_transient(samples: np.ndarray, segment: int = 1024, threshold_sigma: float = 5.0,
                             min_departure_db: float = 0.25) -> Transient | None:
    """Find a leading run of segments whose power departs from the steady part's.

    Parameters
    ----------
    samples : complex ndarray
        The opening of a capture (at least 16 segments; fewer gives None).
    segment : int
        Segment length, samples.
    threshold_sigma : float
        Departure, in robust standard deviations of the steady part's segment powers, beyond
        which a segment counts as unsettled (5: about 6e-7 false alarms per Gaussian segment).
    min_departure_db : float
        Smallest departure that counts, dB (common practice, no source).

    Returns
    -------
    Transient or None
        None when the first segment is already settled.
    """
    p = segment_powers_db(np.asarray(samples), int(segment))
    if p.size < 16:
        return None
    steady = p[p.size // 2:]
    centre = float(np.median(steady))
    scatter = MAD_TO_SIGMA * float(np.median(np.abs(steady - centre)))
    limit = max(threshold_sigma * scatter, min_departure_db)
    out = np.abs(p - centre) > limit
    if not out[0]:
        return None
    k = int(np.argmin(out)) if not out.all() else p.size  # first settled segment
    if k >= p.size // 2:
        return None  # no steady part to compare with: not a start-up transient
    return Transient(n_samples=k * int(segment), departure_db=float(np.max(np.abs(p[:k] - centre))),
                     scatter_db=scatter)


__all__ = ["MAD_TO_SIGMA", "Transient", "detect_startup_transient", "segment_powers_db"]
