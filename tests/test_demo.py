"""``bandcensus demo`` end to end on the bundled simulated recordings (as CI runs it too)."""

import json
import re

import numpy as np
import pytest

from bandcensus.cli import main
from bandcensus.demo import BANNER, demo_recordings, demo_steps
from report_fixtures import SCENE, match_to_scene, scene_carriers_hz


def _headline_counts(text: str, test: str) -> dict:
    """The verdict counts of the first headline printed for ``--test test``."""
    block = text.split(f"--test {test} --enr-db 15")[1]
    joined = " ".join(block.splitlines()[1:5])
    counts = {k: int(re.search(rf"\b{k}\s+(\d+)", joined).group(1))
              for k in ("helped", "hurt", "lost", "gained")}
    counts["of"] = int(re.search(r"\(of\s+(\d+)\s+stations\)", joined).group(1))
    return counts


def test_demo_runs_every_step_and_writes_its_outputs(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "SIMULATED DATA" in text and text.count("$ bandcensus ") == len(demo_steps(out, demo_recordings()))
    # a short instrument summary: the whole printout in about 150 lines, ending with the report's path
    # (each replay step counts as the one final line that ``replay --quiet`` prints)
    lines, in_replay = [], False
    for line in text.splitlines():
        if line.startswith("$ bandcensus "):
            in_replay = line.startswith("$ bandcensus replay ")
            lines += [line] + (["(replay's final line)"] if in_replay else [])
        elif line.startswith("== ") or not in_replay or not line.strip():
            in_replay = in_replay and not line.startswith("== ") and line.strip() != ""
            lines.append(line)
    assert len(lines) <= 160, len(lines)
    assert lines[-1].startswith("Report: ") and lines[-1].endswith("report.html")
    assert "(common practice, no source)" not in text
    assert "SNR" not in text.split("== 5. ")[1]                    # the analyses say C/N
    # the identification recording names the strong stations (RDS PS), shown by the stations command
    names = text.split("--config bare-identify")[2].split("== ")[0]
    assert "VALLEYCL" in names and "HILLTOP" in names
    # ... and the same transmitters carry those names in the comparison (102.4 and 106.1 MHz are
    # the scene's VALLEYCL and HILLTOP: recordings_demo/quorrelby_hill.toml)
    compared = text.split("== 5. ")[1].split("== 6. ")[0]
    assert "VALLEYCL" in compared and "HILLTOP" in compared
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
        joined = " ".join(block.splitlines()[1:12])
        assert joined.index(" helped ") < joined.index("listenable mono") < joined.index("listenable stereo") \
            < joined.index("Could any preamp help here") < joined.index("Trouble:")
    assert "covers 1 of 8 stations in 88-100 MHz" in text          # the peaked preamp misses the band
    # outside noise sets the ceiling: the headline and the noise split state the same figure
    caps = re.findall(r"at most (\d\.\d) dB of C/N", text)
    assert len(caps) == 3 and len(set(caps)) == 1 and 1.0 <= float(caps[0]) <= 2.0
    largest = float(re.search(r"largest improvement any preamp could give\s+│\s+([0-9.]+) dB", text).group(1))
    assert abs(largest - float(caps[0])) <= 0.15

    # the station table lists each of the scene's 12 invented transmitters once (within 25 kHz)
    table = text.split("== 2. ")[1].split("== 3. ")[0]
    listed = [float(m) * 1e6 for m in re.findall(r"│\s+(\d+\.\d{3}) │ fm", table)]
    assert len(match_to_scene(listed, scene_carriers_hz())) == len(scene_carriers_hz()) == len(listed) == 12

    # the story in station counts (truth from the scene's chain, see quorrelby_hill.toml): the peaked
    # preamp (about 2 MHz wide at 94.5 MHz) loses or hurts most of the 12 stations and helps only
    # those near its peak; the staggered one helps nearly all and hurts none; the bench supply loses most
    peaked, staggered, bench = (_headline_counts(text, t) for t in
                                ("preamp-peaked", "preamp-staggered", "preamp-bench-supply"))
    assert peaked["of"] == staggered["of"] == bench["of"] == 12
    assert peaked["lost"] + peaked["hurt"] >= 8 and peaked["helped"] + peaked["gained"] <= 3
    assert staggered["helped"] + staggered["gained"] >= 10 and staggered["hurt"] == staggered["lost"] == 0
    assert bench["lost"] + bench["hurt"] >= 8 and bench["helped"] == 0
    peaked_block = text.split("--test preamp-peaked --enr-db 15")[1].split("== 7. ")[0]
    assert "the test chain attenuates the signals" in " ".join(peaked_block.split())   # not "adds noise": the floor fell
    # the diagnosis names the peaked preamp's fault: a passband that misses the target's stations
    diag = text.split("diagnose --db")[1].split("== ")[0]
    assert "--test preamp-peaked" in diag.splitlines()[0] and "No fault found" not in diag
    assert "PROBLEM: passband" in diag and "covers 1 of 8 stations in 88-100 MHz" in diag
    bench_block = text.split("--test preamp-bench-supply --enr-db 15")[1].split("== 8. ")[0]
    assert "the floor rose more than the signals" in " ".join(bench_block.split())
    # the bench supply injects 30 000 K after the preamp (recordings_demo/quorrelby_hill.toml): the one
    # added-noise estimate (its evidence, in the diagnosis CSV) finds it within two standard uncertainties
    assert main(["diagnose", "--db", str(out / "survey.db"), "--base", "bare", "--test", "preamp-bench-supply",
                 "--enr-db", "15", "--csv"]) == 0
    import csv
    import io

    (finding,) = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert finding["kind"] == "added-noise"
    found, sigma = float(finding["added_noise_k"]), float(finding["added_noise_uncertainty_k"])
    assert abs(found - 30_000.0) <= 2.0 * sigma and sigma < 0.15 * found

    # per station against the scene's chain truth, delta C/N = 10 log10((Ta + Tr) / (Ta + Tp + Tr/G))
    # (Friis 1944): the staggered preamp's measured changes within 1 dB of truth at every station
    from survey.scene import chain_truth, load_scene

    assert main(["compare", "--db", str(out / "survey.db"), "--base", "bare", "--test", "preamp-staggered",
                 "--json", "--no-diagnosis"]) == 0
    rows = json.loads(capsys.readouterr().out)["stations"]
    found = match_to_scene([r["freq_hz"] for r in rows], scene_carriers_hz())
    scene = load_scene(SCENE)
    carriers = np.asarray(sorted(found))
    truth = 10 * np.log10(chain_truth(scene, "bare", "antenna", carriers).system_temp_k
                          / chain_truth(scene, "preamp-staggered", "antenna", carriers).system_temp_k)
    by_freq = {r["freq_hz"]: r for r in rows}
    inside = 0
    for carrier, true in zip(carriers.tolist(), truth.tolist()):
        row = by_freq[int(found[carrier])]
        assert row["delta_cn_db"] == pytest.approx(true, abs=1.0), carrier
        inside += row["ci_low_db"] <= true <= row["ci_high_db"]
    assert inside >= 9  # 95 % intervals: at most a few of 12 may miss (measured: 10 of 12 cover)


def test_demo_refuses_a_non_empty_folder(tmp_path, capsys):
    (tmp_path / "keep.txt").write_text("mine")
    assert main(["demo", "--out", str(tmp_path)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not empty" in err[0]
    assert (tmp_path / "keep.txt").read_text() == "mine"


def test_banner_says_simulated():
    assert BANNER.startswith("SIMULATED DATA") and "invented" in BANNER
