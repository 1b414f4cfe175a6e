"""Tests of survey.dsp against scipy.signal.welch, Parseval, chi-square statistics and simulated truth."""

from __future__ import annotations

import re

import numpy as np
import pytest
import scipy.signal

import synth_signals as ss
from survey import dsp
from survey import psd as psd_steps
from survey.errors import PlanError, RecordingError
from survey.records import SweepSettings

FS = 2.4e6
FFT = 2048
N_HOP = 240_000  # 0.1 s dwell
CENTER = 95.05e6
BW = 200e3
OFFSETS_8 = np.array([-750, -550, -350, -150, 150, 350, 550, 750]) * 1e3  # 200 kHz raster
OFFSETS_10 = np.array([-950, -750, -550, -350, -150, 150, 350, 550, 750, 950]) * 1e3


def db(x):
    return 10.0 * np.log10(x)


# --- conversion and clipping ----------------------------------------------------------------

def test_cu8_conversion_is_b_minus_half_scale():
    b = np.arange(256, dtype=np.uint8)
    z = dsp.to_complex64(np.tile(b, 2), "cu8")
    expected = (np.tile(b, 2).astype(np.float64) - 127.5) / 127.5  # DESIGN.md full-scale rule
    assert z.dtype == np.complex64 and z.size == 256
    got = np.empty(512)
    got[0::2], got[1::2] = z.real, z.imag
    np.testing.assert_allclose(got, expected, rtol=0, atol=1.2e-7)  # float32 rounding only


@pytest.mark.parametrize("datatype", ["cu8", "ci8", "ci16_le", "cf32_le"])
def test_each_datatype_converts_to_documented_full_scale(datatype):
    amplitude = 0.9  # a complex exponential of amplitude A has power A^2 (Parseval)
    z = ss.tone(50_000, FS, 123_456.0, amplitude)
    back = dsp.to_complex64(ss.quantize(z, datatype), datatype)
    power = np.mean(np.abs(back.astype(np.complex128)) ** 2)
    assert db(power) == pytest.approx(db(amplitude**2), abs=0.01)


def test_integer_types_use_documented_divisors():
    assert dsp.to_complex64(np.array([-128, 127], np.int8), "ci8")[0] == pytest.approx(-1 + 127 / 128 * 1j)
    assert dsp.to_complex64(np.array([-32768, 16384], "<i2"), "ci16_le")[0] == pytest.approx(-1 + 0.5j)
    raw = np.array([0.25, -0.5], "<f4")
    assert dsp.to_complex64(raw, "cf32_le")[0] == pytest.approx(0.25 - 0.5j)
    as_bytes = np.array([-32768, 16384], "<i2").view(np.uint8)  # a memory map of the file
    assert dsp.to_complex64(as_bytes, "ci16_le")[0] == pytest.approx(-1 + 0.5j)


def test_unsupported_or_inconsistent_data_is_refused_with_a_remedy():
    with pytest.raises(RecordingError, match="unsupported sample datatype 'cu16_le'.*convert"):
        dsp.to_complex64(np.zeros(4, np.uint16), "cu16_le")
    with pytest.raises(RecordingError, match="whole number of I,Q pairs"):
        dsp.to_complex64(np.zeros(5, np.uint8), "cu8")
    with pytest.raises(RecordingError, match="core:datatype"):
        dsp.to_complex64(np.zeros(4, np.float64), "cf32_le")


def test_clip_fraction_counts_rails():
    raw = np.full(1000, 128, np.uint8)
    raw[:7] = 0
    raw[7:20] = 255
    raw[20:30] = 1  # next to the rail, not on it
    assert dsp.clip_fraction(raw, "cu8") == pytest.approx(20 / 1000)
    s8 = np.zeros(1000, np.int8)
    s8[:3], s8[3:8], s8[8:12] = -128, 127, 126
    assert dsp.clip_fraction(s8, "ci8") == pytest.approx(8 / 1000)
    assert dsp.clip_fraction(np.zeros(10, "<i2"), "ci16_le") == 0.0
    assert dsp.clip_fraction(np.zeros(10, "<f4"), "cf32_le") == 0.0
    assert dsp.clip_fraction(np.zeros(0, "<f4"), "cf32_le") is None


def test_clip_fraction_for_wide_and_float_data():
    """Within one step of full scale: ci16 +-32767/32766 and below; cf32 |x| >= 1 - 1/128."""
    i16 = np.zeros(1000, "<i2")
    i16[:3] = 32767
    i16[3:5] = -32768
    i16[5] = 32766
    i16[6] = 32765  # two steps inside: not counted
    assert dsp.clip_fraction(i16, "ci16_le") == pytest.approx(6 / 1000)
    f = np.full(1000, 0.1, "<f4")
    f[:18] = 1.0           # rails of a receiver capture rescaled to +-1.0 (1.8 %)
    f[18] = -1.0
    f[19] = 127 / 128      # ci8's top code divided by 128: one step below 1.0 counts
    f[20] = 0.98           # more than one 8-bit step below: not counted
    assert dsp.clip_fraction(f, "cf32_le") == pytest.approx(20 / 1000)


# --- PSD ---------------------------------------------------------------------------------------

def test_window_is_scipy_periodic_hann():
    # reference: scipy.signal.get_window('hann', L) is the DFT-even (periodic) Hann window
    for n in (8, 1000, 2048):
        np.testing.assert_array_equal(psd_steps._hann(n), scipy.signal.get_window("hann", n).astype(np.float32))


@pytest.mark.parametrize("datatype", ["cu8", "ci8", "ci16_le", "cf32_le"])
@pytest.mark.parametrize("overlap", [0.0, 0.5])
def test_raw_psd_agrees_with_scipy_welch_on_the_converted_samples(datatype, overlap):
    rng = np.random.default_rng(4)
    z = ss.complex_noise(50_000, 0.01, rng) + ss.tone(50_000, FS, -211_000.0, 0.3)
    block = ss.make_block(z.astype(np.complex64), 98e6, FS, datatype)
    samples = dsp.to_complex64(block.raw, datatype)
    offsets, psd = dsp.raw_averaged_psd(block.raw, datatype, FS, FFT, overlap=overlap)
    # reference implementation of Welch (1967) on the documented full-scale conversion
    f_ref, p_ref = scipy.signal.welch(samples, FS, window="hann", nperseg=FFT, noverlap=int(overlap * FFT),
                                      detrend=False, return_onesided=False, scaling="density")
    np.testing.assert_allclose(offsets, np.fft.fftshift(f_ref))
    np.testing.assert_array_less(np.abs(db(psd) - db(np.fft.fftshift(p_ref))), 0.05)
    # and the same as the two-step path, hop after hop (the reused work buffers hold no state)
    for _ in range(2):
        _, again = dsp.averaged_psd(samples, FS, FFT, overlap=overlap)
        np.testing.assert_allclose(dsp.raw_averaged_psd(block.raw, datatype, FS, FFT, overlap=overlap)[1],
                                   again, rtol=2e-5, atol=0)


def test_long_blocks_are_transformed_in_chunks_with_the_same_result():
    rng = np.random.default_rng(5)
    n = (psd_steps._CHUNK_SEGMENTS * 2 + 3) * 64
    block = ss.make_block(ss.complex_noise(n, 0.02, rng).astype(np.complex64), 98e6, FS, "cu8")
    samples = dsp.to_complex64(block.raw, "cu8")
    _, p_tool = dsp.raw_averaged_psd(block.raw, "cu8", FS, 64)
    _, p_ref = scipy.signal.welch(samples, FS, window="hann", nperseg=64, noverlap=0, detrend=False,
                                  return_onesided=False, scaling="density")
    np.testing.assert_array_less(np.abs(db(p_tool) - db(np.fft.fftshift(p_ref))), 0.05)


@pytest.mark.parametrize("overlap", [0.0, 0.5])
def test_psd_agrees_with_scipy_welch(overlap):
    rng = np.random.default_rng(1)
    z = ss.complex_noise(60_000, 0.01, rng) + ss.tone(60_000, FS, 311_000.0, 0.2)
    offsets, psd = dsp.averaged_psd(z, FS, FFT, overlap=overlap)
    # reference implementation of Welch (1967): scipy.signal.welch, same window and segments
    f_ref, p_ref = scipy.signal.welch(z, FS, window="hann", nperseg=FFT, noverlap=int(overlap * FFT),
                                      detrend=False, return_onesided=False, scaling="density")
    np.testing.assert_allclose(offsets, np.fft.fftshift(f_ref))
    assert psd.dtype == np.float32 and np.all(np.diff(offsets) > 0)
    np.testing.assert_array_less(np.abs(db(psd) - db(np.fft.fftshift(p_ref))), 0.05)


def test_white_noise_level_is_variance_over_sample_rate():
    rng = np.random.default_rng(2)
    variance = 0.01
    _, psd = dsp.averaged_psd(ss.complex_noise(N_HOP, variance, rng), FS, FFT)
    assert db(np.mean(psd)) == pytest.approx(db(variance / FS), abs=0.1)  # density sigma^2 / fs


def test_tone_channel_power_is_amplitude_squared():
    amplitude = 0.3
    z = ss.tone(N_HOP, FS, 351_234.5, amplitude) + ss.tone(N_HOP, FS, -548_000.0, 0.01)
    offsets, psd = dsp.averaged_psd(z, FS, FFT)
    p = dsp.channel_power(offsets, psd, np.array([350e3, -550e3]), BW)
    # Parseval: a complex exponential of amplitude A carries power A^2
    assert db(p[0]) == pytest.approx(db(amplitude**2), abs=0.05)
    assert db(p[1]) == pytest.approx(db(0.01**2), abs=0.05)


def test_channel_power_counts_fractional_edge_bins():
    offsets = np.arange(-8, 8) * 1000.0
    density = np.ones(16)
    got = dsp.channel_power(offsets, density, np.array([250.0, 0.0]), 2500.0)
    np.testing.assert_allclose(got, [2500.0, 2500.0])  # flat density 1 per Hz over 2.5 kHz
    with pytest.raises(PlanError, match="outside the spectrum"):
        dsp.channel_power(offsets, density, np.array([7000.0]), 2500.0)


def test_effective_averages_predict_the_spread_of_the_psd():
    rng = np.random.default_rng(3)
    n = 64 * 512
    for overlap in (0.0, 0.5):
        k_eff = dsp.welch_effective_averages(n, 512, overlap)
        rel = [dsp.averaged_psd(ss.complex_noise(n, 1.0, rng), FS, 512, overlap)[1] * FS for _ in range(40)]
        measured = 1.0 / np.var(np.concatenate(rel))  # Welch (1967): variance S^2 / K_eff
        assert measured == pytest.approx(k_eff, rel=0.06)
    assert dsp.welch_effective_averages(n, 512, 0.0) == 64  # independent segments


def test_log_average_bias_matches_chi_square_simulation():
    rng = np.random.default_rng(4)
    for k in (1, 4, 30):
        draws = rng.gamma(k, 1.0 / k, size=400_000)  # chi2(2K)/(2K)
        assert dsp.log_average_bias_db(k) == pytest.approx(np.mean(db(draws)), abs=0.01)


# --- noise floor -------------------------------------------------------------------------------

def _scene(density, occupied, cn_db, seed, stereo=True):
    """Noise of PSD ``density`` plus FM stations at ``occupied`` offsets with C/N ``cn_db``."""
    rng = np.random.default_rng(seed)
    z = ss.shaped_noise(N_HOP, FS, density, rng).astype(np.complex128)
    for off, cn in zip(occupied, cn_db):
        noise = ss.band_average(density, off, BW) * BW
        z += ss.fm_broadcast(N_HOP, FS, off, np.sqrt(noise * 10 ** (cn / 10)), rng, stereo=stereo)
    return z.astype(np.complex64)


def _floor_errors_db(density, occupied, cn_db, seed, channels, usable_fraction=0.75):
    z = _scene(density, occupied, cn_db, seed)
    offsets, psd = dsp.averaged_psd(z, FS, FFT)
    usable = dsp.usable_bins(offsets, FS, usable_fraction, 20e3)
    floor = dsp.local_noise_floor(offsets, psd, usable,
                                  effective_averages=dsp.welch_effective_averages(z.size, FFT))
    got = dsp.channel_power(offsets, np.nan_to_num(floor), channels, BW)
    truth = np.array([ss.band_average(density, c, BW) * BW for c in channels])
    return db(got / truth)


def _flat(f):
    return np.full(np.shape(f), 1e-3 / FS)


def _tuned(f):
    return 1e-3 / FS * ss.tuned_circuit_gain(CENTER + f, 95.0e6, 40.0)  # Q 40, peak at -50 kHz


@pytest.mark.parametrize("k_samples", [N_HOP, 4 * FFT])
def test_floor_is_unbiased_on_white_noise(k_samples):
    rng = np.random.default_rng(5)
    errors = []
    for _ in range(12):
        z = ss.complex_noise(k_samples, 1e-3, rng)
        offsets, psd = dsp.averaged_psd(z, FS, FFT)
        usable = dsp.usable_bins(offsets, FS, 0.75, 20e3)
        floor = dsp.local_noise_floor(offsets, psd, usable,
                                      effective_averages=dsp.welch_effective_averages(z.size, FFT))
        errors.append(db(np.mean(floor[usable]) / (1e-3 / FS)))
    # without the chi-square log bias correction K=4 would read about -0.5 dB low
    assert abs(np.mean(errors)) < 0.1


@pytest.mark.parametrize("occupied_khz", [[-750, -350, 150, 550], [-550, -350, 150, 750]])
def test_floor_flat_with_half_the_channels_occupied(occupied_khz):
    occ = np.array(occupied_khz) * 1e3
    err = _floor_errors_db(_flat, occ, [32.0, 18.0, 25.0, 12.0], 11, OFFSETS_8)
    np.testing.assert_array_less(np.abs(err), 0.5)


@pytest.mark.parametrize("occupied_khz", [[-750, -350, 150, 550], [-550, -150, 350, 550]])
def test_floor_behind_tuned_circuit_with_half_the_channels_occupied(occupied_khz):
    occ = np.array(occupied_khz) * 1e3
    err = _floor_errors_db(_tuned, occ, [30.0, 15.0, 36.0, 20.0], 12, OFFSETS_8)
    np.testing.assert_array_less(np.abs(err), 0.5)
    # a plain percentile over the hop misses the shaped, crowded floor by far more
    z = _scene(_tuned, occ, [30.0, 15.0, 36.0, 20.0], 12)
    offsets, psd = dsp.averaged_psd(z, FS, FFT)
    usable = dsp.usable_bins(offsets, FS, 0.75, 20e3)
    naive = np.percentile(psd[usable], 50) * BW
    truth = np.array([ss.band_average(_tuned, c, BW) * BW for c in OFFSETS_8])
    assert np.max(np.abs(db(naive / truth))) > 1.0


def _sharp(f):
    # three tuned circuits of loaded Q 36 at 94.5 MHz (a sharp preamp) over a receiver floor
    # 15 dB below the peak: the floor falls by 8 dB within 1.3 MHz of the resonance
    peak = ss.tuned_circuit_gain(CENTER + f, 94.5e6, 36.0) ** 3
    return 1e-3 / FS * (peak + 10 ** -1.5)


@pytest.mark.parametrize("occupied_khz, seed", [([150, 350, 550], 14), ([150, 350, 550], 15),
                                                ([250, 450, 650], 14)])
def test_floor_under_three_adjacent_stations_on_a_steep_skirt(occupied_khz, seed):
    occ = np.array(occupied_khz) * 1e3
    span_db = db(_sharp(np.array([-550e3]))[0] / _sharp(np.array([750e3]))[0])
    assert span_db > 8.0  # the scene really is steep: 8 dB across the hop
    err = _floor_errors_db(_sharp, occ, [20.0, 35.0, 12.0], seed, OFFSETS_8)
    # a straight bridge or a skirt claim that runs on down the slope misses by 1.5-8 dB here
    np.testing.assert_array_less(np.abs(err), 0.5)


def test_floor_follows_filter_roll_off_near_the_edges():
    def density(f):
        return _tuned(f) * ss.edge_rolloff_gain(f, FS, start_fraction=0.4, depth_db=8.0)
    occ = np.array([-750, -550, -150, 350, 750]) * 1e3
    err = _floor_errors_db(density, occ, [28.0, 16.0, 33.0, 22.0, 12.0], 13, OFFSETS_10,
                           usable_fraction=0.95)
    np.testing.assert_array_less(np.abs(err), 0.5)
    assert ss.edge_rolloff_gain(np.array([1.14e6]), FS)[0] < 0.3  # over 5 dB down at the usable edge


# --- C/N and measure_hop ------------------------------------------------------------------------

SETTINGS = SweepSettings(band="test")


@pytest.mark.parametrize("cn_db", [6.0, 10.0, 20.0, 30.0, 40.0])
def test_carrier_to_noise_matches_truth(cn_db):
    rng = np.random.default_rng(int(cn_db) + 20)
    variance = 1e-3
    station = -350e3
    noise = ss.complex_noise(N_HOP, variance, rng).astype(np.complex128)
    sig = ss.fm_broadcast(N_HOP, FS, station, 1.0, rng)
    n_true = variance / FS * BW  # noise power in the channel bandwidth
    s_unit = ss.in_band_power(sig, FS, station, BW)  # signal power in the channel, exact FFT
    z = noise + np.sqrt(n_true * 10 ** (cn_db / 10) / s_unit) * sig
    block = ss.make_block(z.astype(np.complex64), CENTER, FS)
    _, rows = dsp.measure_hop(block, [int(CENTER + station), int(CENTER + 350e3)], SETTINGS, hop_index=3)
    assert rows[0].received and rows[0].cn_db == pytest.approx(cn_db, abs=0.5)
    assert rows[1].received is False and rows[1].cn_db is None  # empty channel: not received


@pytest.mark.parametrize("seed", [40, 41, 42])
def test_cw_line_in_a_short_hop_is_masked_not_smeared_into_the_floor(seed):
    # a carrier one bin wide, K = 23 averages: the floor under it must not rise with it
    rng = np.random.default_rng(seed)
    variance, amplitude, n = 0.01, 0.1, 48_000
    z = ss.complex_noise(n, variance, rng) + ss.tone(n, FS, 350e3, amplitude, phase=1.0)
    block = ss.make_block(z, CENTER, FS)
    _, rows = dsp.measure_hop(block, [int(CENTER + 350e3)], SETTINGS, hop_index=0)
    n_true = variance / FS * BW
    assert rows[0].noise_dbfs == pytest.approx(db(n_true), abs=0.5)  # the floor goal of DESIGN.md
    assert rows[0].cn_db == pytest.approx(db(amplitude**2 / n_true), abs=0.5)  # Parseval: A^2


def test_measure_hop_fields_and_units():
    rng = np.random.default_rng(30)
    variance = 0.02
    z = ss.complex_noise(N_HOP, variance, rng) + ss.tone(N_HOP, FS, 550e3, 0.1)
    block = ss.make_block(z, CENTER, FS, datatype="cu8")
    channels = [int(CENTER + 550e3), int(CENTER - 350e3)]
    hop, rows = dsp.measure_hop(block, channels, SETTINGS, hop_index=2, keep_psd=True)
    assert hop.index == 2 and hop.center_hz == CENTER and hop.n_samples == N_HOP
    assert isinstance(hop.floor_dbfs_hz, float) and isinstance(hop.clip_fraction, float)
    assert 0.0 <= hop.clip_fraction < 1e-3
    # cu8 quantization adds (1/127.5)^2 / 6 of noise power to the known variance
    expected_floor = db((variance + (1 / 127.5) ** 2 / 6) / FS)
    assert hop.floor_dbfs_hz == pytest.approx(expected_floor, abs=0.15)
    assert hop.psd_freqs_hz.dtype == np.float64 and hop.psd_dbfs_hz.dtype == np.float32
    assert hop.psd_freqs_hz[0] == pytest.approx(CENTER - FS / 2)
    for row, f in zip(rows, channels):
        assert row.freq_hz == f and type(row.freq_hz) is int and row.hop_index == 2
        for value in (row.power_dbfs, row.noise_dbfs, row.noise_density_dbfs_hz):
            assert type(value) is float
        assert row.noise_dbfs == pytest.approx(row.noise_density_dbfs_hz + db(BW), abs=1e-9)
    tone_row = rows[0]
    assert tone_row.received and type(tone_row.cn_db) is float
    signal = 0.1**2
    noise = 10 ** (tone_row.noise_dbfs / 10)
    assert tone_row.cn_db == pytest.approx(db(signal / noise), abs=0.3)
    assert rows[1].received is False and rows[1].cn_db is None
    no_psd, _ = dsp.measure_hop(block, channels, SETTINGS, hop_index=2)
    assert no_psd.psd_freqs_hz is None and no_psd.psd_dbfs_hz is None


def test_measure_hop_refuses_channels_outside_usable_spectrum():
    block = ss.make_block(ss.complex_noise(20_000, 1e-3, np.random.default_rng(31)), CENTER, FS)
    with pytest.raises(PlanError, match="usable spectrum"):
        dsp.measure_hop(block, [int(CENTER + 850e3)], SETTINGS, hop_index=0)
    with pytest.raises(PlanError, match="usable spectrum"):
        dsp.measure_hop(block, [int(CENTER + 50e3)], SETTINGS, hop_index=0)  # over the DC spike
    short = ss.make_block(np.zeros(100, np.complex64), CENTER, FS)
    with pytest.raises(PlanError, match="lengthen the dwell"):
        dsp.measure_hop(short, [], SETTINGS, hop_index=0)


def test_block_end_utc_adds_the_block_duration():
    block = ss.make_block(np.zeros(N_HOP, np.complex64), CENTER, FS,
                          started_utc="2025-03-01T23:59:59.950000Z")
    end = dsp.block_end_utc(block)
    assert end == "2025-03-02T00:00:00.050000Z"  # 240 000 samples at 2.4 MS/s = 0.1 s
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{6}Z", end)  # survey.store.utc_now format
    bad = ss.make_block(np.zeros(10, np.complex64), CENTER, FS, started_utc="yesterday")
    with pytest.raises(RecordingError, match="ISO 8601"):
        dsp.block_end_utc(bad)
