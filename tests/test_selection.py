"""The analysis model: one Survey, labels checked once with one error, every matrix read once."""

from __future__ import annotations

import pytest

import analysis.selection as selection
from analysis.errors import NoDataError
from analysis.report.build import build_report
from analysis.selection import Survey
from analysis.workflows import NoiseOptions, assess
from report_fixtures import ENR_DB, simulated_db


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    return simulated_db(tmp_path_factory.mktemp("sel") / "sim.db")


def test_one_error_names_every_missing_label_and_what_exists(db):
    with Survey(db) as survey:
        with pytest.raises(NoDataError) as err:
            survey.require(["bare", "nope-1", "nope-2"])
    text = str(err.value)
    assert "'nope-1', 'nope-2'" in text and "bare (antenna: 3 sweeps" in text and "preamp-peaked (" in text
    assert text.count("\n") == 0


def test_report_reads_each_matrix_once(db, monkeypatch):
    reads: list[tuple[int, ...]] = []
    real = selection.read_sweep_matrix

    def counting(conn, sweeps):
        reads.append(tuple(s.id for s in sweeps))
        return real(conn, sweeps)

    monkeypatch.setattr(selection, "read_sweep_matrix", counting)
    report = build_report(db, "bare", "preamp-peaked", enr_db=ENR_DB)
    assert report.comparison is not None and report.noise is not None and report.diagnosis is not None
    # no set of sweeps is read twice, and no read is a part of an earlier one
    for k, ids in enumerate(reads):
        assert not any(set(ids) <= set(earlier) for earlier in reads[:k]), (ids, reads[:k])


def test_compare_command_and_report_compose_the_same_results(db):
    with Survey(db) as survey:
        a = assess(survey, "bare", "preamp-peaked", options=NoiseOptions(enr_db=ENR_DB))
        again = assess(survey, "bare", "preamp-peaked", options=NoiseOptions(enr_db=ENR_DB))
        assert again.comparison is a.comparison and again.diagnosis is a.diagnosis and again.noise is a.noise
    report = build_report(db, "bare", "preamp-peaked", enr_db=ENR_DB)
    assert list(report.summary[:4]) == list(a.headlines)
