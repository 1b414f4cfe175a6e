"""Station identity from RDS: PI, PS and PTY of one block of IQ, and merged across sweeps.

Rules that keep a wrong name out (a 10-bit checkword is fooled by about one noise window in a
thousand, and no error is ever corrected):

* **PI** is reported only when *confirmed*: the same code in two checked blocks (A, or C' of a
  version B group) at the synchronised alignment, or one group whose four blocks all check
  (A-B-C/C'-D with consistent offsets). Two different confirmed codes in one block of IQ give
  no PI at all.
* **PS** characters and **PTY** come only from groups whose four blocks all check and whose PI
  is the confirmed one; PS from group type 0 (0A or 0B) segments.
* Across sweeps (:func:`merge_rds`) segments are accumulated only from results carrying the
  PI that most results confirm; results confirming another PI are counted as conflicts.

``ps`` is the whole 8-character name, or None until all four segments are known; ``ps_partial``
shows what is known with ``_`` for each missing character (None when nothing is known).
Characters outside plain printable ASCII, and ``_`` itself, are shown as ``?`` (the RDS basic
table agrees with ASCII for letters, digits, space and common punctuation, from memory of
IEC 62106 Annex E), so ``_`` in ``ps_partial`` always means "not yet received" and a stored
``ps_partial`` gives the segments back (:func:`segments_from_partial`).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

from survey.rds.code import block_kinds_of, words_from_bits
from survey.rds.demod import station_bits
from survey.rds.frames import BlockSlot, find_alignment, read_slots

MISSING_CHAR = "_"
#: Consecutive checked block slots (any four in sequence, as in A-B-C-D) that confirm a PI
#: found among them: 40 checkword bits, the same evidence as one whole group.
RUN_BLOCKS = 4


class _IdentityViews:
    """Views shared by a result and a merged identity: the block error rate, the PS (whole or
    partial) and the PI in hex, from ``pi``, ``ps_segments`` and the block counts."""

    pi: int | None
    ps_segments: tuple[tuple[int, str], ...]
    blocks_received: int
    blocks_errored: int

    @property
    def block_error_rate(self) -> float | None:
        """Failed over received block slots, None when none were received (no synchronisation)."""
        return self.blocks_errored / self.blocks_received if self.blocks_received else None

    @property
    def ps(self) -> str | None:
        """The whole 8-character PS name, None unless all four segments are known."""
        return _ps_whole(dict(self.ps_segments))

    @property
    def ps_partial(self) -> str | None:
        """PS with ``_`` for unknown characters; None when no segment is known."""
        return _ps_partial(dict(self.ps_segments))

    @property
    def pi_hex(self) -> str | None:
        """PI as four upper-case hex digits, or None."""
        return None if self.pi is None else f"{self.pi:04X}"


@dataclass(frozen=True)
class RdsResult(_IdentityViews):
    """What one block of IQ says about one station.

    Attributes
    ----------
    pi : int or None
        Confirmed programme identification code (16 bits).
    ps_segments : tuple of (int, str)
        PS segments read, ``(address 0..3, two characters)``, sorted by address.
    pty : int or None
        Programme type code 0..31 from a fully checked group.
    blocks_received : int
        Block slots read at the synchronised alignment (0 without synchronisation).
    blocks_errored : int
        Of those, slots whose checkword or offset did not fit.
    pilot_locked : bool
        The subcarrier reference came from the 19 kHz pilot.
    """

    pi: int | None
    ps_segments: tuple[tuple[int, str], ...]
    pty: int | None
    blocks_received: int
    blocks_errored: int
    pilot_locked: bool = False

    @classmethod
    def from_columns(cls, rds_pi: int | None, rds_ps: str | None, rds_pty: int | None, rds_blocks: int,
                     rds_block_errors: int) -> "RdsResult":
        """Rebuild a result from stored columns (``rds_ps`` as :attr:`ps_partial`), for :func:`merge_rds`."""
        return cls(rds_pi, segments_from_partial(rds_ps), rds_pty, int(rds_blocks or 0), int(rds_block_errors or 0))


@dataclass(frozen=True)
class RdsIdentity(_IdentityViews):
    """A station's identity merged over many results (sweeps); see :func:`merge_rds`.

    ``results`` merged, ``results_with_pi`` of them confirming ``pi``, ``conflicts`` confirming
    another code; block counts summed over all results.
    """

    pi: int | None
    ps_segments: tuple[tuple[int, str], ...]
    pty: int | None
    results: int
    results_with_pi: int
    conflicts: int
    blocks_received: int
    blocks_errored: int


def _ps_whole(segments: dict[int, str]) -> str | None:
    return "".join(segments[s] for s in range(4)) if all(s in segments for s in range(4)) else None


def _ps_partial(segments: dict[int, str]) -> str | None:
    if not segments:
        return None
    return "".join(segments.get(s, MISSING_CHAR * 2) for s in range(4))


def _char(code: int) -> str:
    return chr(code) if 0x20 <= code <= 0x7D and code != ord(MISSING_CHAR) else "?"


def segments_from_partial(ps_partial: str | None) -> tuple[tuple[int, str], ...]:
    """PS segments back from a stored ``ps_partial`` text (``_`` marks a missing character)."""
    if not ps_partial:
        return ()
    text = str(ps_partial).ljust(8, MISSING_CHAR)[:8]
    return tuple((s, text[2 * s:2 * s + 2]) for s in range(4) if MISSING_CHAR not in text[2 * s:2 * s + 2])


def _groups(slots: Sequence[BlockSlot]) -> dict[int, list[BlockSlot]]:
    out: dict[int, list[BlockSlot]] = {}
    for s in slots:
        out.setdefault(s.group, []).append(s)
    return out


def _pi_in_runs(slots: Sequence[BlockSlot]) -> set[int]:
    """PI codes (A or C' blocks) inside runs of ``RUN_BLOCKS`` or more consecutive checked slots."""
    out: set[int] = set()
    run: list[BlockSlot] = []
    for s in [*slots, None]:
        if s is not None and s.checks:
            run.append(s)
            continue
        if len(run) >= RUN_BLOCKS:
            out |= {b.info for b in run if b.position == 0 or b.c_prime}
        run = []
    return out


def identity_from_bits(bits: np.ndarray, pilot_locked: bool = False) -> RdsResult:
    """PI, PS segments, PTY and block counts from differentially decoded RDS bits."""
    alignment = find_alignment(block_kinds_of(words_from_bits(bits)))
    if alignment is None:
        return RdsResult(None, (), None, 0, 0, pilot_locked)
    slots = read_slots(bits, alignment)
    errored = sum(not s.checks for s in slots)
    pi_blocks = Counter(s.info for s in slots if s.checks and (s.position == 0 or s.c_prime))
    complete = [g for g in _groups(slots).values()
                if len(g) == 4 and all(s.checks for s in g)]
    confirmed = {pi for pi, n in pi_blocks.items() if n >= 2}
    confirmed |= _pi_in_runs(slots)
    pi = next(iter(confirmed)) if len(confirmed) == 1 else None
    segments: dict[int, Counter] = {}
    ptys: Counter = Counter()
    if pi is not None:
        for g in complete:
            a, b, c, d = g
            if a.info != pi or (c.c_prime and c.info != pi):
                continue
            ptys[(b.info >> 5) & 0x1F] += 1
            if b.info >> 12 == 0:
                text = _char(d.info >> 8) + _char(d.info & 0xFF)
                segments.setdefault(b.info & 0x3, Counter())[text] += 1
    chosen = tuple(sorted((s, c.most_common(1)[0][0]) for s, c in segments.items()))
    pty = ptys.most_common(1)[0][0] if ptys else None
    return RdsResult(pi, chosen, pty, len(slots), errored, pilot_locked)


def decode_stations(iq: np.ndarray, sample_rate_hz: float, offsets_hz: Iterable[float]) -> list[RdsResult]:
    """:func:`decode_station` for several stations of one hop, sharing the hop's FFT."""
    import scipy.fft  # here, not at import: reading a census needs no FFT
    z = np.asarray(iq)
    if z.ndim != 1 or z.size < 16 or not np.iscomplexobj(z):
        raise ValueError("decode_station needs a 1-D complex IQ array of at least 16 samples")
    spectrum = scipy.fft.fft(z.astype(np.complex64, copy=False))
    out = []
    for off in offsets_hz:
        if not abs(float(off)) < sample_rate_hz / 2:
            raise ValueError(f"station offset {off} Hz lies outside the hop (+-{sample_rate_hz / 2:.0f} Hz)")
        rb = station_bits(spectrum, float(sample_rate_hz), float(off))
        out.append(identity_from_bits(rb.bits, rb.pilot_locked))
    return out


def decode_station(iq: np.ndarray, sample_rate_hz: float, offset_hz: float) -> RdsResult:
    """Decode the RDS of the station ``offset_hz`` Hz from the centre of a hop's complex IQ.

    ``iq`` is the hop at full scale (complex, e.g. from :func:`survey.dsp.to_complex64`),
    ``sample_rate_hz`` its rate. A full PS needs four groups 0A, 416 bits: 0.35 s at
    1187.5 bit/s, plus up to one group (88 ms) to find the first group boundary.
    """
    return decode_stations(iq, sample_rate_hz, [offset_hz])[0]


def merge_rds(results: Iterable[RdsResult]) -> RdsIdentity:
    """Merge one station's results (e.g. one per sweep) into an identity.

    The PI is the code confirmed by the most results (a tie between codes gives None); PS
    segments and PTY are taken only from results confirming that PI, each segment's most
    frequent text winning. Block counts are summed over every result.
    """
    items = list(results)
    votes = Counter(r.pi for r in items if r.pi is not None)
    top = votes.most_common(2)
    pi = None
    if top and (len(top) == 1 or top[0][1] > top[1][1]):
        pi = top[0][0]
    segments: dict[int, Counter] = {}
    ptys: Counter = Counter()
    for r in items:
        if pi is None or r.pi != pi:
            continue
        for s, text in r.ps_segments:
            segments.setdefault(s, Counter())[text] += 1
        if r.pty is not None:
            ptys[r.pty] += 1
    return RdsIdentity(
        pi=pi,
        ps_segments=tuple(sorted((s, c.most_common(1)[0][0]) for s, c in segments.items())),
        pty=ptys.most_common(1)[0][0] if ptys else None,
        results=len(items),
        results_with_pi=votes.get(pi, 0) if pi is not None else 0,
        conflicts=sum(n for code, n in votes.items() if code != pi),
        blocks_received=sum(r.blocks_received for r in items),
        blocks_errored=sum(r.blocks_errored for r in items),
    )
