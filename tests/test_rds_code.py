"""The RDS transmitter side against IEC 62106: checkwords, offset syndromes, group 0A, symbols.

Sources: REFERENCES.md, "Stations, identity ..." (generator polynomial, offset words [M] and the
syndromes derived from them [D]); the standard's own syndrome table, recalled from memory,
checked through the parity-check-matrix convention it uses. Every expected value that can be is
recomputed here by plain polynomial long division, independently of survey.rds.code.
"""

from __future__ import annotations

import numpy as np
import pytest

from survey.rds import code
from survey.rds.waveform import BIT_S, biphase_baseband, differential_decode, differential_encode

# g(x) = x^10 + x^8 + x^7 + x^5 + x^4 + x^3 + 1, highest power first
G_BITS = [1, 0, 1, 1, 0, 1, 1, 1, 0, 0, 1]
OFFSETS = {"A": 0x0FC, "B": 0x198, "C": 0x168, "C'": 0x350, "D": 0x1B4}


def _bits(value: int, width: int) -> list[int]:
    return [(value >> (width - 1 - i)) & 1 for i in range(width)]


def _long_division_remainder(dividend: list[int]) -> list[int]:
    """Remainder of a GF(2) polynomial (coefficients highest power first) divided by g(x)."""
    work = list(dividend)
    for i in range(len(work) - len(G_BITS) + 1):
        if work[i]:
            for j, g in enumerate(G_BITS):
                work[i + j] ^= g
    return work[-10:]


def _value(bits: list[int]) -> int:
    out = 0
    for b in bits:
        out = (out << 1) | b
    return out


def _reference_checkword(info: int, block: str) -> int:
    """IEC 62106: remainder of m(x) x^10 divided by g(x), plus the offset word (modulo 2)."""
    return _value(_long_division_remainder(_bits(info, 16) + [0] * 10)) ^ OFFSETS[block]


@pytest.mark.parametrize("info", [0x0000, 0x0001, 0x8000, 0xFFFF, 0xE3D2, 0x1234, 0xA5A5])
@pytest.mark.parametrize("block", ["A", "B", "C", "C'", "D"])
def test_checkword_is_remainder_plus_offset(info, block):
    assert code.checkword(info, block) == _reference_checkword(info, block)


def test_checkword_of_zero_information_is_the_offset_word():
    # m = 0: the remainder is 0, so the checkword is the offset word itself (IEC 62106 definition).
    for block, offset in OFFSETS.items():
        assert code.checkword(0, block) == offset


def test_generator_polynomial_and_offset_words_match_the_standard():
    assert code.GENERATOR == _value(G_BITS)
    assert code.OFFSET_WORDS == OFFSETS


def test_offset_word_syndromes_as_derived_in_references():
    # REFERENCES.md [D]: syndrome (block(x) x^10) mod g(x) of each offset word.
    expected = {"A": 0x17F, "B": 0x00E, "C": 0x12F, "C'": 0x2EC, "D": 0x297}
    for name, offset in OFFSETS.items():
        remainder = _value(_long_division_remainder(_bits(offset, 26) + [0] * 10))
        assert remainder == expected[name]
        assert code.OFFSET_SYNDROMES[name] == expected[name]


def test_syndromes_in_the_standards_own_convention():
    # From memory of IEC 62106 Annex B: with its parity-check matrix (first ten rows the identity,
    # i.e. syndrome = w(x) x^-16 mod g(x)) the offset words give A 0x3D8, B 0x3D4, C 0x25C,
    # C' 0x3CC, D 0x258. Both conventions differ by the fixed factor x^26, so they agree here.
    inverse_x16 = next(h for h in range(1, 1024)
                       if _value(_long_division_remainder(_bits(h, 10) + [0] * 16)) == 1)
    expected = {"A": 0x3D8, "B": 0x3D4, "C": 0x25C, "C'": 0x3CC, "D": 0x258}
    for name, offset in OFFSETS.items():
        product = 0
        for i in range(10):
            if (inverse_x16 >> i) & 1:
                product ^= offset << i
        assert _value(_long_division_remainder(_bits(product, 20))) == expected[name]


def test_received_block_syndrome_names_the_block_and_detects_errors():
    rng = np.random.default_rng(5)
    for name in code.BLOCK_KINDS:
        for info in rng.integers(0, 1 << 16, 20):
            block = code.encode_block(int(info), name)
            kinds = code.block_kinds_of(np.array([block], dtype=np.int64))
            assert code.BLOCK_KINDS[int(kinds[0])] == name
            # every burst of length <= 10 is detected (cyclic-code property): never a valid block
            for start in range(0, 17):
                burst = int(rng.integers(1, 1 << 10)) | 1
                bad = block ^ (burst << start)
                assert code.syndrome(bad) != code.OFFSET_SYNDROMES[name]


def test_vectorised_syndromes_equal_the_scalar_definition():
    rng = np.random.default_rng(6)
    words = rng.integers(0, 1 << 26, 500, dtype=np.int64)
    assert code.syndromes_of(words).tolist() == [code.syndrome(int(w)) for w in words]


def test_group_0a_bit_by_bit():
    pi, ps, pty, segment = 0xE3D2, "HILLTOP", 10, 1
    bits = code.group_bits(code.group0_words(pi, ps, pty, segment, di=0b0100)).tolist()
    assert len(bits) == 104
    # block A: PI then its checkword with offset A
    assert bits[0:16] == _bits(pi, 16)
    assert bits[16:26] == _bits(_reference_checkword(pi, "A"), 10)
    # block B: group type code 0000, B0 = 0 (version A), TP = 0, PTY, TA = 0, M/S = 1 (music),
    # decoder-identification bit for segment 1 (d2 of 0b0100 -> 1), segment address 01
    b = bits[26:42]
    assert b[0:4] == [0, 0, 0, 0]
    assert b[4] == 0 and b[5] == 0
    assert b[6:11] == _bits(pty, 5)
    assert b[11] == 0 and b[12] == 1
    assert b[13] == 1
    assert b[14:16] == [0, 1]
    assert bits[42:52] == _bits(_reference_checkword(_value(b), "B"), 10)
    # block C (version A): two alternative-frequency codes, 224 "no AF" and 205 "filler" [M]
    assert bits[52:60] == _bits(224, 8) and bits[60:68] == _bits(205, 8)
    assert bits[68:78] == _bits(_reference_checkword(_value(bits[52:68]), "C"), 10)
    # block D: PS characters 2 and 3 ("LL")
    assert bits[78:86] == _bits(ord("L"), 8) and bits[86:94] == _bits(ord("L"), 8)
    assert bits[94:104] == _bits(_reference_checkword(_value(bits[78:94]), "D"), 10)


def test_group_0b_repeats_pi_in_block_c_prime():
    words = code.group0_words(0x1234, "ABCDEFGH", 3, 2, version_b=True)
    assert words[2] == (0x1234, "C'")
    assert (words[1][0] >> 11) & 1 == 1


def test_ps_name_rules():
    assert code.ps_bytes("RIDGE 1") == b"RIDGE 1 "
    with pytest.raises(ValueError):
        code.ps_bytes("NINECHARS")
    with pytest.raises(ValueError):
        code.ps_bytes("CAF\u00c9")


def test_differential_coding_round_trip():
    rng = np.random.default_rng(7)
    d = rng.integers(0, 2, 300).astype(np.uint8)
    for previous in (0, 1):
        e = differential_encode(d, previous)
        # e_k = e_{k-1} XOR d_k, written out for the first bits
        assert e[0] == previous ^ d[0] and e[1] == e[0] ^ d[1]
        assert differential_decode(e).tolist() == d[1:].tolist()
        # inverting every symbol (a 180 degree carrier ambiguity) leaves the data unchanged
        assert differential_decode(1 - e).tolist() == d[1:].tolist()


def test_biphase_spectrum_follows_the_shaping_and_pulse_pair():
    # Random +-1 symbols: PSD of sum a_k q(t - k td) is |Q(f)|^2 / td with
    # |Q|^2 = cos(pi f td / 4) * 4 sin^2(pi f td / 2) up to 2/td = 2375 Hz, zero above (from
    # memory of IEC 62106's data-shaping definition) and a null at 0 Hz (biphase).
    fs = 48_000.0
    n = 1 << 17
    rng = np.random.default_rng(8)
    enc = rng.integers(0, 2, int(n / fs / BIT_S) + 10)
    s = biphase_baseband(enc, -4 * BIT_S, n, fs)
    seg = s[: (n // 4096) * 4096].reshape(-1, 4096) * np.hanning(4096)
    psd = (np.abs(np.fft.rfft(seg, axis=1)) ** 2).mean(axis=0)
    f = np.fft.rfftfreq(4096, 1 / fs)
    model = np.where(f <= 2 / BIT_S, np.cos(np.pi * np.minimum(f, 2 / BIT_S) * BIT_S / 4), 0.0) \
        * 4 * np.sin(np.pi * f * BIT_S / 2) ** 2
    # sums over 300 Hz sub-bands (about 25 bins x 32 segments each: 4 % scatter expected)
    ratios = [psd[(f >= lo) & (f < lo + 300)].sum() / model[(f >= lo) & (f < lo + 300)].sum()
              for lo in range(300, 2100, 300)]
    assert max(ratios) / min(ratios) < 1.15
    peak = psd.max()
    assert psd[f > 3000].max() < 1e-3 * peak
    assert psd[f < 30].max() < 0.05 * peak


def test_subcarrier_sits_at_57_khz_in_phase_with_the_third_pilot_harmonic():
    from survey import fm
    from survey.rds.waveform import RdsProgramme, rds_subcarrier

    fs, n = 240_000.0, 48_000  # 0.2 s: 5 Hz bins
    t = np.arange(n) / fs
    theta = 2 * np.pi * 19_000.0 * t + 0.7
    x = rds_subcarrier(np.random.default_rng(1), RdsProgramme(0x1234, "ABC", 1), n, fs, 3 * theta)
    assert 0.95 < np.abs(x).max() <= 1.0 + 1e-6  # peak r of the multiplex when r = 1
    spec = np.abs(np.fft.rfft(x.astype(np.float64))) ** 2
    f = np.fft.rfftfreq(n, 1 / fs)
    assert spec[np.abs(f - 57_000) <= 2_400].sum() > 0.999 * spec.sum()
    # coherent with cos(3 theta): the quadrature (sin) product carries no data energy
    i_part = x * np.cos(3 * theta)
    q_part = x * np.sin(3 * theta)
    lowpass = np.abs(f) < 3_000
    i_low = np.fft.irfft(np.fft.rfft(i_part) * lowpass, n)
    q_low = np.fft.irfft(np.fft.rfft(q_part) * lowpass, n)
    assert np.mean(q_low ** 2) < 1e-4 * np.mean(i_low ** 2)
    # in a stereo multiplex the peak stays within the 75 kHz deviation (|mpx| <= 1, BS.450-3)
    mpx = fm.multiplex(np.random.default_rng(2), n * 10, 2.4e6, True, rds=RdsProgramme(0x1234, "ABC", 1))
    assert np.abs(mpx).max() <= 1.0 + 1e-6
    assert fm.RDS_FRACTION * 75e3 == pytest.approx(3_000.0)
