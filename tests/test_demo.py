"""``bandcensus demo`` end to end on the bundled simulated recordings (as CI runs it too)."""

import re

import pytest

from bandcensus.cli import main
from bandcensus.demo import BANNER, demo_recordings, demo_steps


def test_demo_runs_every_step_and_writes_its_outputs(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "SIMULATED DATA" in text and text.count("$ bandcensus ") == len(demo_steps(out, demo_recordings()))
    for name in ("survey.db", "report.html", "noise.png", "passband-preamp-peaked.png",
                 "passband-preamp-staggered.png", "compare-preamp-staggered.png"):
        assert (out / name).stat().st_size > 1000, name
    # the story of the demo, in numbers the commands printed
    assert "not covered" in text and "; covered" in text          # peaked too narrow, staggered covers 88-100
    assert "added-noise" in text                                    # the bench supply is found
    assert "Error:" not in text
    # one wording for the headlines: counts per item, listenable, the ceiling, trouble
    for test in ("preamp-peaked", "preamp-staggered", "preamp-bench-supply"):
        block = text.split(f"--test {test} --enr-db 15")[1]
        lines = [line for line in block.splitlines()[1:12]]
        joined = " ".join(lines)
        assert joined.index(" helped ") < joined.index("Listenable") < joined.index("Could any preamp help here") \
            < joined.index("Trouble:")
    assert "covers 1 of 8 stations in 88-100 MHz" in text          # the peaked preamp misses the band
    assert "at most 1.7 dB of C/N" in text                          # outside noise sets the ceiling
    # the bench supply injects 30 000 K after the preamp (recordings_demo/quorrelby_hill.toml): the one
    # added-noise estimate finds it within two of its standard uncertainties
    found = float(re.search(r"added_noise_k: ([0-9.]+)", text).group(1))
    sigma = float(re.search(r"added_noise_uncertainty_k: ([0-9.]+)", text).group(1))
    assert abs(found - 30_000.0) <= 2.0 * sigma and sigma < 0.15 * found


def test_demo_refuses_a_non_empty_folder(tmp_path, capsys):
    (tmp_path / "keep.txt").write_text("mine")
    assert main(["demo", "--out", str(tmp_path)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not empty" in err[0]
    assert (tmp_path / "keep.txt").read_text() == "mine"


def test_banner_says_simulated():
    assert BANNER.startswith("SIMULATED DATA") and "invented" in BANNER
