"""Several test configurations against one base, ranked: which preamp (or trimmer setting) is best.

Every configuration is compared with the base on the SAME census stations (one census over the
sweeps of all configurations, :meth:`analysis.selection.Survey.item_matrices`), each with its own
pairing and intervals (:func:`analysis.compare.core.compare_matrices`). Per configuration:

* **stations helped**: verdict ``improved`` or ``gained`` (interval of the change wholly above
  zero), with the range up to the stations whose interval still reaches above zero
  (``undetermined`` with an upper bound above 0): ``helped_low`` .. ``helped_high``;
* **median change in C/N over the stations heard by all** (detected in at least half of the
  sweeps of the base and of every test configuration), with the distribution-free interval of
  a median (:func:`analysis.compare.intervals.median_interval`) over those stations;
* **stations listenable** (mono, C/N at or above
  :data:`analysis.compare.summary.LISTENABLE_MONO_CN_DB`, common practice, no source) in the
  test configuration, with the range over its sweeps: listenable in every sweep .. in any sweep.

Ranked by stations helped, then the median change, then stations listenable (most first).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from analysis.compare.core import Comparison, compare_matrices
from analysis.compare.intervals import median_interval
from analysis.compare.summary import LISTENABLE_MONO_CN_DB, THRESHOLD_SOURCE
from analysis.errors import BadParameterError
from analysis.selection import Survey, as_survey


@dataclass(frozen=True)
class RankedConfiguration:
    """One test configuration's place in the ranking (dB values; None where undefined)."""

    rank: int
    configuration: str
    helped: int
    helped_low: int
    helped_high: int
    hurt: int
    lost: int
    median_delta_cn_db: float | None
    median_ci_low_db: float | None
    median_ci_high_db: float | None
    stations_heard_by_all: int
    listenable_mono: int
    listenable_low: int
    listenable_high: int
    listenable_mono_base: int
    comparison: Comparison

    def to_dict(self) -> dict:
        """JSON form (without the full comparison)."""
        return {k: getattr(self, k) for k in (
            "rank", "configuration", "helped", "helped_low", "helped_high", "hurt", "lost", "median_delta_cn_db",
            "median_ci_low_db", "median_ci_high_db", "stations_heard_by_all", "listenable_mono",
            "listenable_low", "listenable_high", "listenable_mono_base")}


def rank_configurations(source: Survey | str | Path, base: str, tests: Sequence[str], *, input: str = "antenna",
                        since: str | None = None, until: str | None = None, min_change_db: float = 0.5,
                        confidence: float = 0.95) -> list[RankedConfiguration]:
    """Compare every configuration of ``tests`` with ``base`` on the same stations and rank them.

    Raises :class:`BadParameterError` for fewer than two test labels or a repeated label, and
    :class:`analysis.errors.NoDataError` (naming what exists) when a label has no sweeps.
    """
    tests = list(tests)
    if len(tests) < 2 or len(set(tests) | {base}) != len(tests) + 1:
        raise BadParameterError(f"give two or more different test labels, none equal to the base; got {tests}")
    survey, opened = as_survey(source)
    try:
        survey.require([base, *tests], input)
        groups = [survey.sweeps(label, input, since, until) for label in (base, *tests)]
        matrices = survey.item_matrices(*groups)
    finally:
        if opened:
            survey.close()
    mat_b, test_mats = matrices[0], matrices[1:]
    heard_all = np.asarray(mat_b.detected).mean(axis=0) >= 0.5
    for m in test_mats:
        heard_all &= np.asarray(m.detected).mean(axis=0) >= 0.5
    common = set(np.round(np.asarray(mat_b.freqs_hz)[heard_all]).astype(np.int64).tolist())
    out = []
    for label, mat_t in zip(tests, test_mats):
        res = compare_matrices(mat_b, mat_t, base, label, input=input, min_change_db=min_change_db,
                               confidence=confidence)
        s = res.summary
        helped = s["helped"] + s["gained"]
        maybe = sum(c.verdict == "undetermined" and c.ci_high_db is not None and c.ci_high_db > 0
                    for c in res.items)
        deltas = [c.delta_cn_db for c in res.items if c.freq_hz in common and c.delta_cn_db is not None]
        med, lo, hi = median_interval(deltas, confidence)
        listen = np.asarray(mat_t.cn_db) >= LISTENABLE_MONO_CN_DB
        out.append(dict(
            configuration=label, helped=helped, helped_low=helped, helped_high=helped + maybe, hurt=s["hurt"],
            lost=s["lost"], median_delta_cn_db=None if med is None else round(med, 4),
            median_ci_low_db=None if lo is None else round(lo, 4), median_ci_high_db=None if hi is None else round(hi, 4),
            stations_heard_by_all=len(common), listenable_mono=s["listenable"]["mono_test"],
            listenable_low=int(listen.all(axis=0).sum()) if listen.shape[0] else 0,
            listenable_high=int(listen.any(axis=0).sum()), listenable_mono_base=s["listenable"]["mono_base"],
            comparison=res,
        ))
    out.sort(key=lambda r: (-r["helped"], -(r["median_delta_cn_db"] if r["median_delta_cn_db"] is not None
                                             else -np.inf), -r["listenable_mono"]))
    return [RankedConfiguration(rank=k + 1, **r) for k, r in enumerate(out)]


#: Where the listenable threshold comes from (said beside every ranking).
RANKING_NOTE = (f"ranked by stations helped (improved or gained; range up to those whose interval still reaches "
                f"above 0), then the median C/N change over the stations heard by all (sign-test interval of the "
                f"median), then stations listenable in mono (C/N >= {LISTENABLE_MONO_CN_DB:g} dB, "
                f"{THRESHOLD_SOURCE}; range: in every test sweep .. in any)")
