"""Noise figures, noise temperatures and the site's outside noise.

Modules: :mod:`~analysis.noise.arithmetic` (Friis, Y-factor, ENR tables, uncertainty),
:mod:`~analysis.noise.outside` (ITU-R P.372 outside noise), :mod:`~analysis.noise.groups`
(per-input averages of sweep groups), :mod:`~analysis.noise.workflow` (the measurement
workflow), :mod:`~analysis.noise.plots` (figures).
"""

from analysis.noise.arithmetic import EnrTable, load_enr_table, parse_enr_csv
from analysis.noise.workflow import NoiseResult, analyse_noise, predicted_noise_rise_db

__all__ = ["EnrTable", "NoiseResult", "analyse_noise", "load_enr_table", "parse_enr_csv", "predicted_noise_rise_db"]
