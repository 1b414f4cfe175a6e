"""Block synchronisation and reading groups from a bit stream (no error correction).

Every 26-bit window of the stream is checked against the five offset-word syndromes
(:mod:`survey.rds.code`). A window that checks as block kind ``k`` at bit ``i`` implies groups
starting at ``i - 26 position(k)`` modulo 104: the *alignment*. Synchronisation is the alignment
holding the most checked blocks, accepted only with at least ``MIN_SYNC_BLOCKS`` of them. (A 10-bit checkword matches a noise window with
probability 2^-10 per offset word; at 1187.5 bit/s there are about 5.8 random matches per second
of noise, so a lone match means nothing.) With the alignment fixed, every whole block slot of the
stream is read: a slot *checks* when its syndrome is that of the offset word its position
expects (C or C' for the third). Errors are only detected, never corrected: a corrected block
is a guess, and a guess can name the wrong station.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from survey.rds.code import BLOCK_BITS, BLOCK_KINDS, BLOCK_POSITION, GROUP_BITS, block_kinds_of, words_from_bits

MIN_SYNC_BLOCKS = 3
_POSITION_OF_KIND = np.array([BLOCK_POSITION[k] for k in BLOCK_KINDS], dtype=np.int64)
_KIND_C_PRIME = BLOCK_KINDS.index("C'")


@dataclass(frozen=True)
class BlockSlot:
    """One 26-bit block slot read at the synchronised alignment.

    ``group`` counts groups from the stream's first slot, ``position`` is 0..3 (A, B, C/C', D),
    ``info`` the 16 information bits, ``checks`` whether the checkword and offset fit the
    position, ``c_prime`` whether a third block checked with offset C'.
    """

    group: int
    position: int
    info: int
    checks: bool
    c_prime: bool


def find_alignment(kinds: np.ndarray) -> int | None:
    """Bit index (0..103) where groups start, or None when no synchronisation is established.

    ``kinds`` is :func:`survey.rds.code.block_kinds_of` of every 26-bit window.
    """
    at = np.nonzero(kinds >= 0)[0]
    if at.size < MIN_SYNC_BLOCKS:
        return None
    align = (at - BLOCK_BITS * _POSITION_OF_KIND[kinds[at]]) % GROUP_BITS
    counts = np.bincount(align, minlength=GROUP_BITS)
    best = int(np.argmax(counts))
    return best if counts[best] >= MIN_SYNC_BLOCKS else None


def read_slots(bits: np.ndarray, alignment: int) -> list[BlockSlot]:
    """Every whole block slot of ``bits`` at ``alignment`` (see :func:`find_alignment`)."""
    words = words_from_bits(bits)
    kinds = block_kinds_of(words)
    first_slot = alignment % BLOCK_BITS
    group_of_first = -((alignment - first_slot) // BLOCK_BITS)  # slot index relative to a group start
    slots = []
    for s, start in enumerate(range(first_slot, words.size, BLOCK_BITS)):
        index = group_of_first + s
        position = index % 4
        kind = int(kinds[start])
        ok = kind >= 0 and int(_POSITION_OF_KIND[kind]) == position
        slots.append(BlockSlot(group=index // 4, position=position, info=int(words[start]) >> 10,
                               checks=ok, c_prime=ok and kind == _KIND_C_PRIME))
    return slots
