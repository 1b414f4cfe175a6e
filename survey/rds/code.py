"""The RDS block code: checkwords, offset words, syndromes and the layout of group type 0.

Definitions (IEC 62106, formerly EN 50067; see REFERENCES.md, "Stations, identity ..."):
a block is 26 bits sent most significant first, a 16-bit information word ``m`` followed by a
10-bit checkword ``c = ((m(x) x^10) mod g(x)) XOR d`` where
``g(x) = x^10 + x^8 + x^7 + x^5 + x^4 + x^3 + 1`` and ``d`` is the offset word of the block's
position in its group (A 0x0FC, B 0x198, C 0x168, C' 0x350, D 0x1B4). Four blocks make a
104-bit group. Here the syndrome of a received 26-bit word ``w`` is ``(w(x) x^10) mod g(x)``; an
error-free block carrying offset word ``d`` has the syndrome of ``d`` alone (the information part
contributes a multiple of ``g``), which is how a decoder tells both "no error" and "which block".

Group type 0 (basic tuning and switching information), from memory of IEC 62106 section 3:
block B holds the group type code (4 bits), the version bit B0 (0 = A, 1 = B), TP, PTY (5 bits),
TA, M/S, one decoder-identification bit and the 2-bit PS segment address; block C holds two
alternative-frequency codes (version A) or the PI again (version B, offset C'); block D holds
two PS characters. Segment address 0 carries DI bit d3, address 3 carries d0 (from memory).
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

#: Generator polynomial ``x^10 + x^8 + x^7 + x^5 + x^4 + x^3 + 1`` as a bit mask (bit i = x^i).
GENERATOR = (1 << 10) | (1 << 8) | (1 << 7) | (1 << 5) | (1 << 4) | (1 << 3) | 1
CHECK_BITS = 10
INFO_BITS = 16
BLOCK_BITS = 26
GROUP_BITS = 104

#: Offset words by block name (IEC 62106).
OFFSET_WORDS: dict[str, int] = {"A": 0x0FC, "B": 0x198, "C": 0x168, "C'": 0x350, "D": 0x1B4}
#: Position of each block name within a group (C and C' share the third place).
BLOCK_POSITION: dict[str, int] = {"A": 0, "B": 1, "C": 2, "C'": 2, "D": 3}

#: Alternative-frequency codes used in block C of a group 0A when a station sends no list:
#: 224 "no AF exists" and 205 "filler" (from memory of IEC 62106, AF code table).
AF_NONE_PAIR = (224, 205)


def poly_mod(value: int, modulus: int = GENERATOR) -> int:
    """Remainder of the GF(2) polynomial ``value`` divided by ``modulus`` (bit i = x^i)."""
    deg = modulus.bit_length() - 1
    v = int(value)
    while v.bit_length() - 1 >= deg:
        v ^= modulus << (v.bit_length() - 1 - deg)
    return v


def checkword(info: int, block: str) -> int:
    """10-bit checkword of a 16-bit information word for block ``block`` ("A", "B", "C", "C'", "D")."""
    if not 0 <= int(info) < 1 << INFO_BITS:
        raise ValueError(f"information word {info!r} is not 16 bits")
    return poly_mod(int(info) << CHECK_BITS) ^ OFFSET_WORDS[block]


def encode_block(info: int, block: str) -> int:
    """The 26-bit block (information word then checkword) as an integer, first-sent bit highest."""
    return (int(info) << CHECK_BITS) | checkword(info, block)


def syndrome(word: int) -> int:
    """Syndrome ``(w(x) x^10) mod g(x)`` of a 26-bit received word ``w``."""
    return poly_mod(int(word) << CHECK_BITS)


#: Syndrome of an error-free block by block name (the syndrome of its offset word).
OFFSET_SYNDROMES: dict[str, int] = {name: syndrome(d) for name, d in OFFSET_WORDS.items()}

#: Block names in a fixed order for vectorised matching; index into it = "block kind".
BLOCK_KINDS: tuple[str, ...] = ("A", "B", "C", "C'", "D")


def _syndrome_tables() -> tuple[np.ndarray, np.ndarray]:
    """Lookup tables for the 13 high and 13 low bits of a 26-bit word (the syndrome is linear)."""
    unit = np.array([syndrome(1 << i) for i in range(BLOCK_BITS)], dtype=np.int32)
    idx = np.arange(1 << 13, dtype=np.int64)
    lo = np.zeros(1 << 13, dtype=np.int32)
    hi = np.zeros(1 << 13, dtype=np.int32)
    for bit in range(13):
        on = ((idx >> bit) & 1).astype(bool)
        lo[on] ^= unit[bit]
        hi[on] ^= unit[bit + 13]
    return hi, lo


_SYN_HI, _SYN_LO = _syndrome_tables()
_KIND_OF_SYNDROME = np.full(1 << CHECK_BITS, -1, dtype=np.int8)
for _k, _name in enumerate(BLOCK_KINDS):
    _KIND_OF_SYNDROME[OFFSET_SYNDROMES[_name]] = _k


def words_from_bits(bits: np.ndarray) -> np.ndarray:
    """Every 26-bit window of a 0/1 bit stream as int64 words (window i starts at bit i)."""
    b = np.asarray(bits, dtype=np.int64)
    if b.size < BLOCK_BITS:
        return np.zeros(0, dtype=np.int64)
    windows = np.lib.stride_tricks.sliding_window_view(b, BLOCK_BITS)
    weights = np.int64(1) << np.arange(BLOCK_BITS - 1, -1, -1, dtype=np.int64)
    return windows @ weights


def syndromes_of(words: np.ndarray) -> np.ndarray:
    """Vectorised :func:`syndrome` of int64 26-bit words (table lookup)."""
    w = np.asarray(words, dtype=np.int64)
    return _SYN_HI[(w >> 13) & 0x1FFF] ^ _SYN_LO[w & 0x1FFF]


def block_kinds_of(words: np.ndarray) -> np.ndarray:
    """Index into :data:`BLOCK_KINDS` of the offset word each word checks with, -1 for none."""
    return _KIND_OF_SYNDROME[syndromes_of(words)]


# ----------------------------------------------------------------------------------------
# Group type 0 layout
# ----------------------------------------------------------------------------------------


def ps_bytes(name: str) -> bytes:
    """An 8-character programme service name as bytes (padded with spaces, basic Latin only).

    The RDS basic character table agrees with ASCII for letters, digits, space and common
    punctuation (from memory of IEC 62106 Annex E); other characters are refused.
    """
    text = str(name)
    if len(text) > 8:
        raise ValueError(f"programme service name {name!r} is longer than 8 characters")
    if any(not (0x20 <= ord(ch) <= 0x7D) or ch in "$^`" for ch in text):
        raise ValueError(f"programme service name {name!r}: use letters, digits, space and plain punctuation")
    return text.ljust(8).encode("ascii")


def group0_block_b(pty: int, segment: int, *, version_b: bool = False, tp: bool = False, ta: bool = False,
                   music: bool = True, di: int = 0) -> int:
    """Block B of a group type 0 (bit 15 first): type 0000, B0, TP, PTY, TA, M/S, DI bit, address."""
    if not 0 <= int(pty) < 32:
        raise ValueError(f"PTY {pty!r} is not 0..31")
    if not 0 <= int(segment) < 4:
        raise ValueError(f"PS segment address {segment!r} is not 0..3")
    di_bit = (int(di) >> (3 - int(segment))) & 1
    return ((0 << 12) | (int(version_b) << 11) | (int(tp) << 10) | (int(pty) << 5) | (int(ta) << 4)
            | (int(music) << 3) | (di_bit << 2) | int(segment))


def group0_words(pi: int, ps: str, pty: int, segment: int, *, version_b: bool = False,
                 af_pair: tuple[int, int] = AF_NONE_PAIR, **flags) -> tuple[tuple[int, str], ...]:
    """The four (information word, block name) pairs of a group 0A (or 0B) for one PS segment."""
    if not 0 <= int(pi) < 1 << 16:
        raise ValueError(f"PI {pi!r} is not a 16-bit code")
    chars = ps_bytes(ps)
    b = group0_block_b(pty, segment, version_b=version_b, **flags)
    if version_b:
        c = (int(pi), "C'")
    else:
        c = ((af_pair[0] << 8) | af_pair[1], "C")
    d = (chars[2 * segment] << 8) | chars[2 * segment + 1]
    return ((int(pi), "A"), (b, "B"), c, (d, "D"))


def group_bits(words: Sequence[tuple[int, str]]) -> np.ndarray:
    """104 bits (uint8 0/1, first-sent first) of a group given its four (info, block name) pairs."""
    out = np.empty(len(words) * BLOCK_BITS, dtype=np.uint8)
    for k, (info, name) in enumerate(words):
        block = encode_block(info, name)
        out[k * BLOCK_BITS:(k + 1) * BLOCK_BITS] = [(block >> (BLOCK_BITS - 1 - i)) & 1 for i in range(BLOCK_BITS)]
    return out


def ps_cycle_bits(pi: int, ps: str, pty: int, *, version_b: bool = False) -> np.ndarray:
    """The bits of four groups 0A (0B) carrying the whole PS name, segments 0..3 (416 bits)."""
    return np.concatenate([group_bits(group0_words(pi, ps, pty, s, version_b=version_b)) for s in range(4)])
