"""Added noise after the preamp is one estimate, printed alike by ``noise``, ``compare`` and ``diagnose``.

The estimate is the chain diagnosis's added-noise check (``N_test = G N_base + a G + beta`` on the
unoccupied channels, :func:`analysis.diagnose.noise_checks.fit_unshaped_floor`), reached through
:func:`analysis.workflows.added_noise_for`. On the demo database (SIMULATED: the invented town's
preamp on a noisy bench supply) every command must print the same kelvin figure and the same
excess over the receiver's floor, and ``noise`` must not print a second figure of its own.
"""

from __future__ import annotations

import json
import re

import pytest

from bandcensus.cli import main

ARGS = ["--enr-db", "15"]


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    out = tmp_path_factory.mktemp("added-noise") / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    return out / "survey.db"


def _run(capsys, argv) -> str:
    capsys.readouterr()
    assert main(argv) == 0
    return capsys.readouterr().out


def _figures(text: str) -> tuple[str, str]:
    """The excess (dB) and the kelvin figure of the one added-noise line of a command's output."""
    lines = [line for line in text.splitlines() if "added-noise" in line and " K" in line]
    assert len(lines) == 1, text
    excess = re.search(r"([0-9.]+) dB above the receiver's own floor", lines[0])
    kelvin = re.search(r"about ([0-9]+) K", lines[0])
    assert excess and kelvin, lines[0]
    return excess.group(1), kelvin.group(1)


def test_noise_compare_and_diagnose_print_the_same_added_noise(demo_db, capsys):
    db = str(demo_db)
    noise = _run(capsys, ["noise", "--db", db, "--receiver", "bare", "--system", "preamp-bench-supply", *ARGS])
    compare = _run(capsys, ["compare", "--db", db, "--base", "bare", "--test", "preamp-bench-supply", "--brief",
                            *ARGS])
    diagnose = _run(capsys, ["diagnose", "--db", db, "--base", "bare", "--test", "preamp-bench-supply", *ARGS])
    figures = {name: _figures(text) for name, text in (("noise", noise), ("compare", compare),
                                                          ("diagnose", diagnose))}
    assert len(set(figures.values())) == 1, figures
    # the demo's bench supply adds 30 000 K (scene truth); the estimate is of that order
    assert 15_000 < int(figures["noise"][1]) < 60_000


def test_noise_json_carries_the_diagnosis_evidence_and_not_its_own_split(demo_db, capsys):
    db = str(demo_db)
    noise = json.loads(_run(capsys, ["noise", "--db", db, "--receiver", "bare", "--system", "preamp-bench-supply",
                                     *ARGS, "--json"]))
    diagnose = json.loads(_run(capsys, ["diagnose", "--db", db, "--base", "bare", "--test", "preamp-bench-supply",
                                        *ARGS, "--json"]))
    (finding,) = [f for f in diagnose["findings"] if f["kind"] == "added-noise"]
    assert noise["added_noise_after_preamp"]["evidence"]["added_noise_k"] == finding["evidence"]["added_noise_k"]
    assert not {"noise_after_gain_k", "preamp_nf_at_input_db"} & set(noise["summary"])


def test_a_clean_preamp_reads_none_found_in_plain_words_and_the_fit_with_explain(demo_db, capsys):
    db = str(demo_db)
    argv = ["noise", "--db", db, "--receiver", "bare", "--system", "preamp-staggered", *ARGS]
    plain = [line for line in _run(capsys, argv).splitlines() if line.startswith("Added noise after the preamp")]
    explained = [line for line in _run(capsys, [*argv, "--explain"]).splitlines()
                 if line.startswith("Added noise after the preamp")]
    assert len(plain) == 1 and "none found" in plain[0] and "beta" not in plain[0], plain
    assert len(explained) == 1 and "N = G N_base" in explained[0], explained  # the fit, for those who ask
    diagnose = _run(capsys, ["diagnose", "--db", db, "--base", "bare", "--test", "preamp-staggered", *ARGS])
    assert "added-noise" not in diagnose.split("Checked:")[0]  # no finding there either
