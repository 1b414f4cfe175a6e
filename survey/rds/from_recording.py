"""Decoding RDS of chosen stations across the captures of a SigMF recording."""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

from survey.dsp import to_complex64
from survey.rds.identity import RdsResult, decode_stations
from survey.sources.recording import open_recording

#: A station is decoded in a capture only when its whole channel (+-125 kHz) and some margin
#: lie inside the capture: ``|offset| <= fs/2 - EDGE_MARGIN_HZ``.
EDGE_MARGIN_HZ = 150_000.0


def identify_in_recording(path: str | Path, freqs_hz: Sequence[float]) -> list[tuple[float, list[RdsResult]]]:
    """``(freq_hz, [result per capture holding it])`` for each station frequency, in the order given.

    Raises RecordingError (from :func:`survey.sources.recording.open_recording`) for a bad file.
    """
    out: dict[float, list[RdsResult]] = {float(f): [] for f in freqs_hz}
    with open_recording(path) as rec:
        limit = rec.sample_rate_hz / 2 - EDGE_MARGIN_HZ
        for centre in rec.fixed_centers_hz:
            inside = [f for f in out if abs(f - centre) <= limit]
            if not inside:
                continue
            rec.tune(centre)
            block = rec.read(None)
            iq = to_complex64(block.raw, block.datatype)
            for f, r in zip(inside, decode_stations(iq, block.sample_rate_hz, [f - centre for f in inside])):
                out[f].append(r)
    return list(out.items())
