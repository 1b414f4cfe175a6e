"""``compare --test a,b,c``: configurations ranked on the same stations, against known truth.

Truth model: tests/compare_truth.py (simulated, invented stations). Two preamps are measured
against the same base in two blocks of alternating sweeps: 'preamp-a' with the fixture's gain,
'preamp-b' with 6 dB less gain and the same noise rise, so b's true change is a's minus 6 dB at
every station.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import replace

import numpy as np
import pytest

from analysis.compare.intervals import median_interval
from analysis.compare.ranking import rank_configurations
from analysis.errors import BadParameterError
from bandcensus.cli import main
from compare_truth import CN0_DB, FREQS_HZ, GAIN_DB, RISE_DB, make_truth, write_db


@pytest.fixture(scope="module")
def two_preamps(tmp_path_factory):
    path = tmp_path_factory.mktemp("rank") / "rank.db"
    write_db(path, make_truth(31, n_per_side=12), test="preamp-a")
    later = make_truth(32, n_per_side=12, gain_db=GAIN_DB - 6.0)
    later = replace(later, base_s=later.base_s + 10_000.0, test_s=later.test_s + 10_000.0)
    write_db(path, later, test="preamp-b")
    return path


def test_median_interval_order_statistics():
    """Sign-test interval of a median: n = 10 at 95 % is [x(2), x(9)] (P(B <= 1) = 11/1024 <= 0.025,
    P(B <= 2) = 56/1024 > 0.025 for B ~ Binomial(10, 1/2))."""
    x = np.arange(10.0)[::-1]
    med, lo, hi = median_interval(x, 0.95)
    assert (med, lo, hi) == (4.5, 1.0, 8.0)
    assert median_interval([1.0, 2.0, 3.0, 4.0, 5.0], 0.95)[1:] == (None, None)  # n = 5: too few
    rng = np.random.default_rng(7)
    hits = sum(lo <= 0.0 <= hi for lo, hi in (median_interval(rng.standard_cauchy(15), 0.95)[1:]
                                               for _ in range(400)))
    assert hits / 400 >= 0.93  # coverage holds for any continuous distribution (here Cauchy)


def test_ranking_follows_the_truth(two_preamps):
    ranked = rank_configurations(two_preamps, "bare", ["preamp-b", "preamp-a"])
    assert [r.configuration for r in ranked] == ["preamp-a", "preamp-b"] and [r.rank for r in ranked] == [1, 2]
    a, b = ranked
    assert a.helped > b.helped and a.helped_low <= a.helped <= a.helped_high
    # median change over the stations heard by all against the true changes at those stations
    heard = [c.freq_hz for c in a.comparison.items
             if c.base_detected_fraction >= 0.5 and c.test_detected_fraction >= 0.5]
    assert a.stations_heard_by_all <= len(heard)
    col = {f: j for j, f in enumerate(FREQS_HZ.tolist())}
    strong = [f for f in heard if CN0_DB[col[f]] > 12]
    true_a = np.median([(GAIN_DB - RISE_DB)[col[f]] for f in strong])
    assert a.median_delta_cn_db == pytest.approx(true_a, abs=1.0)
    assert a.median_delta_cn_db - b.median_delta_cn_db == pytest.approx(6.0, abs=0.7)
    assert a.median_ci_low_db is not None and a.median_ci_low_db <= a.median_delta_cn_db <= a.median_ci_high_db
    assert a.listenable_low <= a.listenable_mono <= a.listenable_high  # mean over pairs lies within the sweeps
    with pytest.raises(BadParameterError):
        rank_configurations(two_preamps, "bare", ["preamp-a"])


def test_ranking_command(two_preamps, capsys):
    assert main(["compare", "--db", str(two_preamps), "--base", "bare", "--test", "preamp-b,preamp-a", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [r["configuration"] for r in doc["ranking"]] == ["preamp-a", "preamp-b"]
    assert set(doc["headlines"]) == {"preamp-a", "preamp-b"}
    assert main(["compare", "--db", str(two_preamps), "--base", "bare", "--test", "preamp-b,preamp-a", "--csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [r["configuration"] for r in rows] == ["preamp-a", "preamp-b"] and rows[0]["rank"] == "1"
    assert main(["compare", "--db", str(two_preamps), "--base", "bare", "--test", "preamp-b,preamp-a"]) == 0
    out = capsys.readouterr().out
    assert out.index("preamp-a") < out.index("preamp-b") and "heard by all" in out
    assert main(["compare", "--db", str(two_preamps), "--base", "bare", "--test", "preamp-a,bare"]) == 2
    assert "none equal to --base" in capsys.readouterr().err
    code = main(["compare", "--db", str(two_preamps), "--base", "bare", "--test", "preamp-a,preamp-q"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and "'preamp-q'" in err[0]
