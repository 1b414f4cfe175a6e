"""The protocol every IQ source implements, so the sweep engine cannot tell them apart."""

from __future__ import annotations

from typing import Protocol, runtime_checkable

from survey.records import IQBlock


@runtime_checkable
class IQSource(Protocol):
    """A source of raw IQ: a receiver, a SigMF recording or a simulated scene.

    Life cycle: ``tune(center_hz)`` (includes any settle time; discarded samples never reach
    the caller), then ``read(n_samples)`` one or more times, for each hop; ``close()`` at the end.

    Attributes
    ----------
    kind : str
        ``"rtl"``, ``"recording"`` or ``"simulated"``; stored with the run.
    sample_rate_hz : float
        Actual sample rate (read back from the device where possible).
    fixed_centers_hz : tuple[float, ...] | None
        For a recording, the centre of each capture in order (the sweep engine then plans
        channels onto these centres instead of choosing its own); None for tunable sources.
    """

    kind: str

    @property
    def sample_rate_hz(self) -> float: ...

    @property
    def fixed_centers_hz(self) -> tuple[float, ...] | None: ...

    def describe(self) -> dict:
        """Device or file description for the ``runs`` table (JSON-serialisable)."""
        ...

    def tune(self, center_hz: float) -> None:
        """Tune to ``center_hz`` (Hz) and discard samples for the settle time."""
        ...

    def read(self, n_samples: int | None) -> IQBlock:
        """Read ``n_samples`` complex samples (None: the source's natural length, e.g. a whole capture)."""
        ...

    def close(self) -> None:
        """Release the device or file. Safe to call twice."""
        ...
