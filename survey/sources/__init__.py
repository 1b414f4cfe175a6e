"""IQ sources behind one protocol: live receiver, SigMF replay, simulated scene.

Only :mod:`survey.sources.rtl` imports the receiver driver; import it explicitly.
"""

from survey.sources.base import IQSource

__all__ = ["IQSource"]
