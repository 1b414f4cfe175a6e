"""Channels go to the capture where their exact margin (:func:`survey.bandplan.channel_margin_hz`)
is largest, ties to the earlier capture: the whole-number comparison the planner uses agrees
with the margin rule written out in fractions, on random settings and capture centres (repeated
centres make ties)."""

from __future__ import annotations

import numpy as np

from survey import bandplan
from survey.errors import PlanError


def _by_margins(freqs, centers, limits):
    d_min, d_max, inner, outer = limits
    owner = np.full(freqs.size, -1)
    for i, f in enumerate(freqs.tolist()):
        best = None
        for j, c in enumerate(centers.tolist()):
            if d_min <= abs(f - c) <= d_max:
                m = bandplan.channel_margin_hz(f, c, inner, outer)
                if best is None or m > best:
                    best, owner[i] = m, j
    return owner


def test_assignment_equals_the_largest_exact_margin_with_ties_to_the_earlier_capture():
    rng = np.random.default_rng(0)
    checked = contested = 0
    for _ in range(200):
        settings = (float(rng.choice([2.4e6, 2.048e6, 1.0e6, 3.2e6])), float(rng.choice([0.75, 0.7, 0.6])),
                    float(rng.choice([20e3, 0.0, 12.5e3, 33.3e3])), float(rng.choice([200e3, 100e3, 180e3])))
        try:
            limits = bandplan._check_settings(*settings)
        except PlanError:
            continue
        freqs = np.sort(rng.choice(np.arange(87_500_000, 108_000_000, 50_000), 80, replace=False)).astype(np.int64)
        centers = np.sort(rng.integers(87_000_000, 108_500_000, int(rng.integers(1, 40)))).astype(np.int64)
        if rng.random() < 0.3:
            centers = np.repeat(centers, 2)  # the same centre twice: equal margins, the earlier wins
        want = _by_margins(freqs, centers, limits)
        assert np.array_equal(bandplan._assign(freqs, centers, limits), want)
        checked += 1
        d = np.abs(np.subtract.outer(freqs, centers))
        contested += int((((d >= limits[0]) & (d <= limits[1])).sum(axis=1) > 1).sum())
    assert checked > 100 and contested > 1000
