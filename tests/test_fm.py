"""FM multiplex synthesis against the broadcast standard's numbers (ITU-R BS.450-3)."""

from __future__ import annotations

import numpy as np
import pytest

from survey import fm

FS = 2.4e6
N = 240_000  # 0.1 s: bins of 10 Hz, so 19 kHz and 38 kHz fall on bins


def _mpx(stereo: bool, seed: int = 1) -> np.ndarray:
    return fm.multiplex(np.random.default_rng(seed), N, FS, stereo)


def _spectrum(x: np.ndarray):
    spec = np.fft.rfft(x.astype(np.float64)) / x.size
    return np.fft.rfftfreq(x.size, 1 / FS), spec


@pytest.mark.parametrize("stereo", [False, True])
def test_peak_deviation_never_exceeds_75_khz(stereo):
    # ITU-R BS.450-3: +-75 kHz peak deviation. |multiplex| <= 1 keeps the FM inside it.
    mpx = _mpx(stereo)
    assert np.abs(mpx).max() <= 1.0 + 1e-6
    phase = fm.fm_phase(mpx, FS, 75e3)
    inst_hz = np.diff(phase) * FS / (2 * np.pi)
    assert np.abs(inst_hz).max() <= 75e3 * (1 + 1e-6)
    assert np.abs(inst_hz).max() > 40e3  # programme peaks use a good part of it


def test_pilot_is_19_khz_at_9_percent():
    f, spec = _spectrum(_mpx(True))
    k = int(np.argmin(np.abs(f - 19e3)))
    amplitude = 2 * np.abs(spec[k])
    assert amplitude == pytest.approx(0.09, rel=0.02)


def test_stereo_subcarrier_only_for_stereo():
    # L-R on a 38 kHz double-sideband suppressed carrier: 23-53 kHz holds power in stereo,
    # almost none in mono; the 38 kHz carrier itself is suppressed.
    for stereo in (True, False):
        f, spec = _spectrum(_mpx(stereo))
        p = np.abs(spec) ** 2
        band = (f > 23e3) & (f < 53e3)
        share = p[band].sum() / p[f > 20].sum()
        if stereo:
            assert share > 0.02
            k = int(np.argmin(np.abs(f - 38e3)))
            assert p[k] < 1e-3 * p[int(np.argmin(np.abs(f - 19e3)))]
        else:
            assert share < 1e-3


def test_audio_is_band_limited_to_15_khz():
    f, spec = _spectrum(_mpx(False))
    p = np.abs(spec) ** 2
    assert p[(f > 16e3)].sum() / p[f > 20].sum() < 0.01  # only the peak limiter's residue


@pytest.mark.parametrize("stereo, carson_hz", [(True, 2 * (75e3 + 53e3)), (False, 2 * (75e3 + 15e3))])
def test_carson_bandwidth_holds_the_power(stereo, carson_hz):
    # Carson's rule B = 2 (deviation + highest modulating frequency) (FS-1037C): stereo 256 kHz,
    # mono 180 kHz; it holds about 98 % of the power or more (common practice, no source).
    offsets, frac = fm.occupancy(("station", stereo, 75e3), FS)
    assert frac.sum() == pytest.approx(1.0)
    assert frac[np.abs(offsets) <= carson_hz / 2].sum() > 0.98


def test_carrier_amplitude_and_offset():
    ph = np.zeros(4800)
    z = fm.carrier(ph, 100e3, FS, 0.5)
    assert z.dtype == np.complex64
    assert np.mean(np.abs(z) ** 2) == pytest.approx(0.25, rel=1e-5)  # Parseval: A^2
    f = np.fft.fftfreq(z.size, 1 / FS)[np.argmax(np.abs(np.fft.fft(z)))]
    assert f == pytest.approx(100e3)
