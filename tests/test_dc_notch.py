"""A station inside the DC guard of a single-capture recording is measured, not dropped.

Truth: white noise (total power s2) plus a station of flat spectrum 100 kHz wide (band-limited
Gaussian noise of power S, brick-wall filtered in the frequency domain) centred on the capture's
centre, plus a DC offset (the converter's spike, power 0.03**2). By Parseval the channel's P is
S + s2 * B / fs without the spike. The notched measurement must find it; a spectrum that is
linear across the notch must be reproduced exactly. The interpolation needs the flanks just
outside the notch to be on the station's flat part: a 50 kHz station under the default 20 kHz
guard leaves them within a few bins of its edge, where the window's leakage lowers them, so
that case is measured with a 5 kHz guard (the spike itself is one or two bins wide).
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest

from bandcensus.cli import main
from survey.dc_notch import notched_psd
from test_recording import write_foreign

FS = 2_400_000.0
N = 600_000
S2 = 0.004          # total noise power
STATION = 0.004     # station power, 50 kHz wide at the centre
DC = 0.03           # DC offset amplitude


def _capture(seed=8, half_width_hz=50e3):
    rng = np.random.default_rng(seed)
    noise = np.sqrt(S2 / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    spec = np.fft.fft(rng.standard_normal(N) + 1j * rng.standard_normal(N))
    f = np.fft.fftfreq(N, 1 / FS)
    spec[np.abs(f) > half_width_hz] = 0
    station = np.fft.ifft(spec)
    station *= np.sqrt(STATION / np.mean(np.abs(station) ** 2))
    return (noise + station + DC).astype(np.complex64)


def test_linear_spectrum_is_reproduced_across_the_notch():
    offsets = np.linspace(-1e5, 1e5, 201)
    psd = 1.0 + offsets / 1e5
    spiky = psd.copy()
    spiky[95:106] += 50.0
    assert np.allclose(notched_psd(offsets, spiky, 5.5e3), psd)


@pytest.mark.parametrize("half_width_hz,guard", [(50e3, []), (25e3, ["--dc-guard-khz", "5"])])
def test_station_at_the_centre_of_one_capture_is_measured_and_marked(tmp_path, capsys, half_width_hz, guard):
    z = _capture(half_width_hz=half_width_hz)
    raw = np.empty(2 * N, "<f4")
    raw[0::2], raw[1::2] = z.real, z.imag
    meta = write_foreign(tmp_path, "one", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    db = tmp_path / "one.db"
    assert main(["replay", str(meta), "--db", str(db), "--config", "x", "--json",
                 "--band", "custom:97.8-98.2:100", *guard]) == 0
    rows = {c["freq_hz"]: c for c in json.loads(capsys.readouterr().out)["sweeps"][0]["channels"]}
    truth = 10 * np.log10(STATION + S2 * 200e3 / FS)
    with_spike = 10 * np.log10(STATION + S2 * 200e3 / FS + DC**2)
    assert 98_000_000 in rows and rows[98_000_000]["received"]
    assert abs(rows[98_000_000]["power_dbfs"] - truth) < 0.15
    assert with_spike - truth > 0.5  # what the spike alone would have added
    conn = sqlite3.connect(db)
    notes = conn.execute("SELECT notes FROM sweeps").fetchone()[0]
    conn.close()
    assert "98.00" in notes and "inside the DC guard measured from a DC-notched spectrum" in notes
    assert 98_100_000 in rows  # channels beside the guard are measured as before
