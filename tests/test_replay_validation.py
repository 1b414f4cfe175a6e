"""Replay validates before writing and reports degenerate data truthfully.

Cases: NaN/inf samples in cf32 data (refused before the run row, naming file, sample and
capture), an FFT the capture cannot fill (message with the largest size that fits), a capture
with few averages (warning with the Welch scatter, stored in the sweep's notes), a recording
failing mid-way (named, earlier sweeps kept), constant samples ("no signal", not received
channels), ``sweeps.recording`` filled, a streamed checksum with progress, bounded reads of
long captures.
"""

from __future__ import annotations

import math
import sqlite3

import numpy as np
import pytest
import sigmf

from bandcensus.cli import main
from survey.errors import RecordingError
from survey.runner import NO_SIGNAL
from survey.sources.recording import open_recording
from test_recording import write_foreign

FS_HZ = 2_400_000.0


def _noise_cf32(n: int, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (0.05 * rng.standard_normal(2 * n)).astype("<f4")


def _one_error(capsys, code) -> str:
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("Error: "), err
    return lines[0]


def test_non_finite_samples_refused_before_the_run(tmp_path, capsys):
    raw = _noise_cf32(40_000)
    raw[2 * 30_000 + 1] = np.nan
    meta = write_foreign(tmp_path, "nan", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6},
                                                      {"core:sample_start": 20_000, "core:frequency": 99e6}], raw)
    db = tmp_path / "n.db"
    line = _one_error(capsys, main(["replay", str(meta), "--db", str(db), "--config", "x", "--band", "custom:97-100:100"]))
    assert str(meta) in line and "sample 30000 (capture 1)" in line and "NaN or infinite" in line
    assert not db.exists()


def test_inf_sample_without_checksum_still_found(tmp_path):
    raw = _noise_cf32(10_000)
    raw[7] = np.inf
    meta = write_foreign(tmp_path, "inf", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw,
                         sha512=False)
    with pytest.raises(RecordingError, match="sample 3 .*NaN or infinite"):
        open_recording(meta)


def test_fft_that_cannot_be_filled_names_the_size_that_fits(tmp_path, capsys):
    meta = write_foreign(tmp_path, "short", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}],
                         _noise_cf32(2048))
    db = tmp_path / "s.db"
    line = _one_error(capsys, main(["replay", str(meta), "--db", str(db), "--config", "x", "--fft-size", "4096",
                                    "--band", "custom:97-99:100"]))
    assert "holds 2048 samples; use --fft-size 2048 or less" in line and not db.exists()


def test_few_averages_warn_with_the_welch_scatter(tmp_path, capsys):
    meta = write_foreign(tmp_path, "few", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}],
                         _noise_cf32(2048 * 3))
    db = tmp_path / "f.db"
    code = main(["replay", str(meta), "--db", str(db), "--config", "x", "--fft-size", "2048",
                 "--band", "custom:97.8-98.2:100"])
    err = capsys.readouterr().err
    assert code == 0 and len(err.splitlines()) == 1
    from survey.dsp import DEFAULT_OVERLAP, welch_effective_averages

    k = 1 + (2048 * 3 - 2048) // (2048 - int(round(DEFAULT_OVERLAP * 2048)))  # segments of averaged_psd
    assert f"capture 0 gives only {k} FFT averages" in err and "dB (1 sigma)" in err
    # Welch (1967): each bin ~ S chi2(2K_eff)/(2K_eff); one sigma is 1/sqrt(K_eff) of S
    sigma = float(err.split("scatters by about ")[1].split(" dB")[0])
    k_eff = welch_effective_averages(2048 * 3, 2048)
    assert k_eff <= k and sigma == pytest.approx(10 * math.log10(1 + 1 / math.sqrt(k_eff)), abs=0.051)
    conn = sqlite3.connect(db)
    notes, recording = conn.execute("SELECT notes, recording FROM sweeps").fetchone()
    conn.close()
    assert "FFT averages" in notes and recording == str(meta)


@pytest.mark.parametrize("value", [0, 127])
def test_constant_samples_are_no_signal(tmp_path, capsys, value):
    raw = np.full(2 * 200_000, value, dtype=np.uint8)
    meta = write_foreign(tmp_path, f"c{value}", "cu8", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    db = tmp_path / "c.db"
    assert main(["replay", str(meta), "--db", str(db), "--config", "x", "--band", "custom:97.4-98.6:100"]) == 0
    out = capsys.readouterr().out
    assert NO_SIGNAL in out and "received" not in out.replace("receiver", "")
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT COUNT(*), SUM(received) FROM channels").fetchone()[1] == 0
    assert NO_SIGNAL in conn.execute("SELECT notes FROM sweeps").fetchone()[0]
    conn.close()


def test_noise_is_not_mistaken_for_no_signal(tmp_path, capsys):
    rng = np.random.default_rng(5)
    raw = np.clip(np.round(127.5 + 6 * rng.standard_normal(2 * 200_000)), 0, 255).astype(np.uint8)
    meta = write_foreign(tmp_path, "noise", "cu8", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    assert main(["replay", str(meta), "--db", str(tmp_path / "n.db"), "--config", "x", "--quiet",
                 "--band", "custom:97.4-98.6:100"]) == 0
    assert NO_SIGNAL not in capsys.readouterr().out


def test_failure_mid_way_names_the_recording_and_keeps_earlier_sweeps(tmp_path, capsys, monkeypatch):
    good = write_foreign(tmp_path, "good", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}],
                         _noise_cf32(50_000))
    bad = write_foreign(tmp_path, "bad", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}],
                        _noise_cf32(50_000, seed=2))
    from survey.sources import recording as rec

    real_read = rec.RecordingSource.read

    def failing_read(self, n):
        if self.path.name.startswith("bad"):
            raise OSError(5, "Input/output error")  # the disk fails while the second file is read
        return real_read(self, n)

    monkeypatch.setattr(rec.RecordingSource, "read", failing_read)
    db = tmp_path / "m.db"
    line = _one_error(capsys, main(["replay", str(good), str(bad), "--db", str(db), "--config", "x",
                                    "--band", "custom:97.8-98.2:100"]))
    assert "Input/output error" in line and str(bad) in line and "earlier recording(s) are stored" in line
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT recording, complete FROM sweeps").fetchall() == [(str(good), 1)]
    assert conn.execute("SELECT status FROM runs").fetchone()[0] == "failed"
    conn.close()


def test_checksum_streamed_with_progress(tmp_path):
    raw = _noise_cf32(3_000_000)  # 24 MB: two blocks of the pass
    meta = write_foreign(tmp_path, "big", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    seen = []
    src = open_recording(meta, progress=lambda done, total: seen.append((done, total)))
    assert src.describe()["checksum_verified"] and len(seen) == 2 and seen[-1] == (raw.nbytes, raw.nbytes)
    data = meta.with_name("big.sigmf-data")
    b = bytearray(data.read_bytes())
    b[-1] ^= 1
    data.write_bytes(bytes(b))
    with pytest.raises(RecordingError, match="checksum"):
        open_recording(meta)


def test_long_capture_read_in_bounded_windows(tmp_path):
    n = 1_000_000
    raw = np.arange(2 * n, dtype=np.uint32).astype(np.uint8)  # position-coded bytes
    meta = write_foreign(tmp_path, "long", "cu8", [{"core:sample_start": 0, "core:frequency": 98e6}], raw,
                         sha512=False)
    src = open_recording(meta, max_hop_samples=1 << 17)
    src.window_samples = 1 << 14
    src.tune(98e6)
    block = src.read(None)
    assert block.raw.size == 2 * (1 << 17)  # bounded: 8 windows of 16384 samples
    windows = block.raw.reshape(8, -1)
    starts = np.linspace(0, n - (1 << 14), 8).astype(np.int64)
    for w, s in zip(windows, starts):
        assert np.array_equal(w, raw[2 * s: 2 * s + w.size])  # each window is the file's own run
    short = open_recording(meta)
    short.tune(98e6)
    assert short.read(None).raw.size == 2 * n  # below the bound: the whole capture, as before


def test_clipping_of_float_captures_is_reported(tmp_path, capsys):
    raw = _noise_cf32(100_000)
    raw[::50][:3600] = 1.0  # 1.8 % of the values at the +1.0 rail, spread over the capture
    meta = write_foreign(tmp_path, "clip", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    assert main(["replay", str(meta), "--db", str(tmp_path / "c.db"), "--config", "x",
                 "--band", "custom:97.4-97.8:100"]) == 0
    assert "clipping up to 1.800 % of samples" in capsys.readouterr().err
    # --quiet: only the closing line; the warning stays out of the way
    assert main(["replay", str(meta), "--db", str(tmp_path / "q.db"), "--config", "x", "--quiet",
                 "--band", "custom:97.4-97.8:100"]) == 0
    quiet = capsys.readouterr()
    assert quiet.err == "" and quiet.out.count("\n") == 1 and quiet.out.startswith("stored 1 sweep (x) in ")
