"""Ground truth of the simulated receiver: expected signal and noise power per channel.

Computed analytically from the same model the renderer draws from (:mod:`survey.scene`):

* noise: ``integral over the channel of |mu|^2 S(f) + |nu|^2 S(-f)`` where
  ``S(f) = k T_rx(f) R(f) / P_fs`` (IQ imbalance folds the mirrored band in), plus the
  quantisation noise, plus the DC offset if the band holds 0 Hz;
* signal: each emitter's power times its spectral occupancy weighted by the roll-off ``R``,
  counted inside the band, plus ``|nu|^2`` times the same for the mirrored band (its image).

Quantisation uses Bussgang's decomposition of the 8-bit quantiser driven by a Gaussian input
of the hop's per-rail variance (:func:`quantiser_gain_and_distortion`): the output is
``alpha x + d`` with ``d`` uncorrelated with ``x`` and taken as white. For a per-rail RMS of more
than about half a step, ``alpha = 1`` and ``d`` has the uniform-model power ``LSB^2/12`` per rail
(Widrow's quantisation theorem); below that, the exact Gaussian values are used. A hop whose
signals clip hard (constant-envelope carriers beyond the rails) is outside the model.

References
----------
.. [1] J. J. Bussgang, "Crosscorrelation functions of amplitude-distorted Gaussian signals,"
       MIT RLE Technical Report 216, 1952.
.. [2] B. Widrow, I. Kollar, *Quantization Noise*, Cambridge University Press, 2008 [M].

``C/N = 10 log10(signal / noise)``, the quantity the sweep estimates as ``(P - N)/N``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING, Sequence

import numpy as np

from survey import fm
from survey.units import db_to_ratio, ratio_to_db

if TYPE_CHECKING:  # pragma: no cover
    from survey.sources.simulated import SimulatedSource


@dataclass(frozen=True)
class Emitter:
    """A narrow signal at the receiver input: name, RF frequency (Hz), power (dBm), kind.

    ``kind`` is ``("station", stereo, deviation_hz)``, ``("im3", stereo1, dev1, stereo2, dev2)``
    or ``("cw",)``; ``sources`` are the station indices it is made from.
    """

    name: str
    freq_hz: float
    power_dbm: float
    kind: tuple
    sources: tuple[int, ...]


@dataclass(frozen=True)
class ChannelTruth:
    """Expected quantities of one channel at the ADC (full scale) and of the chain at its centre.

    ``signal_dbfs`` and ``noise_dbfs`` are powers in the channel bandwidth (noise includes the
    roll-off at that offset, the IQ-imbalance image of the mirrored band and quantisation);
    ``cn_db = signal - noise`` in dB; ``-inf`` where no signal falls in the channel.
    Temperatures (K) are at the channel centre: ``input_temp_k`` what the input presents
    (``ta_k`` for the antenna), ``tp_k``/``tr_k``/``supply_k`` preamp, receiver and supply noise,
    ``system_temp_k`` the whole chain referred to its input; ``gain_db`` is the preamp ``G(f)``.
    """

    freq_hz: float
    center_hz: float
    time_s: float
    signal_dbfs: float
    noise_dbfs: float
    cn_db: float
    noise_density_dbfs_hz: float
    thermal_dbfs: float
    quantisation_dbfs: float
    gain_db: float
    input_temp_k: float
    ta_k: float
    tp_k: float
    tr_k: float
    supply_k: float
    rx_input_temp_k: float
    system_temp_k: float
    emitters: tuple[str, ...] = ()


@lru_cache(maxsize=256)
def _rail_stats(sigma_lsb: float, mean_lsb: float) -> tuple[float, float]:
    if sigma_lsb <= 0:
        return 0.0, 0.0
    u = np.linspace(mean_lsb - 10 * sigma_lsb, mean_lsb + 10 * sigma_lsb, 40_001)
    pdf = np.exp(-0.5 * ((u - mean_lsb) / sigma_lsb) ** 2)
    pdf /= np.trapezoid(pdf, u)
    q = np.rint(u + 127.5) - 127.5  # the steps only: clipping at the rails is outside the model
    eq = np.trapezoid(q * pdf, u)
    cov = np.trapezoid((u - mean_lsb) * (q - eq) * pdf, u)
    var_q = np.trapezoid((q - eq) ** 2 * pdf, u)
    alpha = cov / sigma_lsb**2
    return float(alpha), float(max(var_q - alpha * alpha * sigma_lsb**2, 0.0))


def quantiser_gain_and_distortion(sigma_fs: float, mean_fs: float = 0.0) -> tuple[float, float]:
    """Bussgang gain ``alpha`` and distortion power (FS^2) of one ``cu8`` rail, Gaussian input.

    The rail maps ``x`` (full scale) to ``(round(127.5 + 127.5 x) - 127.5)/127.5``; for
    ``x ~ N(mean, sigma^2)``, ``alpha = Cov(x, Q(x)) / sigma^2`` and the distortion is
    ``Var(Q(x)) - alpha^2 sigma^2``. Computed by numerical integration (uniform limit
    ``alpha = 1``, distortion ``(1/127.5)^2/12``). The rails are left out: the signals that
    reach them are bounded carriers, not Gaussian, and a clipping hop is outside the truth.
    """
    a, d_lsb2 = _rail_stats(round(float(sigma_fs) * 127.5, 5), round(float(mean_fs) * 127.5, 5))
    return a, d_lsb2 / 127.5**2


def _overlap_weights(centers: np.ndarray, width: float, lo: float, hi: float) -> np.ndarray:
    """Fraction of each bin ``[c - width/2, c + width/2]`` inside ``[lo, hi]``."""
    a = np.maximum(centers - width / 2.0, lo)
    b = np.minimum(centers + width / 2.0, hi)
    return np.clip(b - a, 0.0, width) / width


def _emitter_power_in(source: "SimulatedSource", lo_hz: float, e: Emitter, lo_bb: float, hi_bb: float) -> float:
    fs = source.sample_rate_hz
    a2 = float(db_to_ratio(e.power_dbm)) / float(db_to_ratio(source.scene.receiver.full_scale_dbm))
    fb = e.freq_hz - lo_hz
    rec = source.scene.receiver
    if e.kind[0] == "cw":
        return a2 * float(rec.rolloff(np.array([fb]), fs)[0]) if lo_bb <= fb <= hi_bb else 0.0
    offsets, frac = fm.occupancy(tuple(e.kind), fs)
    width = float(offsets[1] - offsets[0])
    pos = fb + offsets
    # the block is circular: tails beyond fs/2 alias to the other edge
    pos = (pos + fs / 2.0) % fs - fs / 2.0
    w = _overlap_weights(pos, width, lo_bb, hi_bb)
    if not np.any(w):
        return 0.0
    return a2 * float(np.sum(frac * w * rec.rolloff(pos, fs)))


def _thermal_in(source: "SimulatedSource", center_hz: float, lo_bb: float, hi_bb: float) -> float:
    u = np.linspace(lo_bb, hi_bb, 401)
    d = source.noise_density_fs2_hz(center_hz, u)
    return float(np.trapezoid(d, u))


def band_power(source: "SimulatedSource", lo_hz: float, emitters: Sequence[Emitter],
               lo_bb: float, hi_bb: float, center_hz: float | None = None) -> tuple[float, float, tuple[str, ...]]:
    """Signal and thermal noise power (FS^2) between baseband offsets, after IQ imbalance.

    Returns ``(signal, thermal_noise, names_of_emitters_contributing)``; quantisation noise is
    not included (add ``quantisation_density * bandwidth``).
    """
    if center_hz is None:
        center_hz = lo_hz / (1.0 + source.scene.receiver.ppm * 1e-6)
    mu, nu = source.scene.receiver.iq_mu_nu
    m2, n2 = abs(mu) ** 2, abs(nu) ** 2
    sig = 0.0
    names = []
    for e in emitters:
        direct = _emitter_power_in(source, lo_hz, e, lo_bb, hi_bb)
        image = _emitter_power_in(source, lo_hz, e, -hi_bb, -lo_bb)
        if direct > 0 or image > 0:
            names.append(e.name if direct > 0 else f"image of {e.name}")
        sig += m2 * direct + n2 * image
    noise = m2 * _thermal_in(source, center_hz, lo_bb, hi_bb) + n2 * _thermal_in(source, center_hz, -hi_bb, -lo_bb)
    dc = complex(*source.scene.receiver.dc_offset)
    if lo_bb <= 0.0 <= hi_bb:
        noise += abs(dc) ** 2
    return sig, noise, tuple(names)


def adc_quantiser_model(source: "SimulatedSource", center_hz: float, lo_hz: float,
                        emitters: Sequence[Emitter]) -> tuple[float, float]:
    """``(alpha^2, distortion density FS^2/Hz)`` of the hop's quantiser (both rails together).

    The per-rail variance is half the total power at the ADC (noise over the whole span plus every
    emitter after roll-off, IQ imbalance ignored), the per-rail mean the DC offset.
    """
    fs = source.sample_rate_hz
    total = _thermal_in(source, center_hz, -fs / 2.0, fs / 2.0)
    fsm = float(db_to_ratio(source.scene.receiver.full_scale_dbm))
    rec = source.scene.receiver
    for e in emitters:
        total += float(db_to_ratio(e.power_dbm)) / fsm * float(rec.rolloff(np.array([e.freq_hz - lo_hz]), fs)[0])
    sigma = float(np.sqrt(total / 2.0))
    a_i, d_i = quantiser_gain_and_distortion(sigma, rec.dc_offset[0])
    a_q, d_q = quantiser_gain_and_distortion(sigma, rec.dc_offset[1])
    return (a_i**2 + a_q**2) / 2.0, (d_i + d_q) / fs


def channel_truths(*, source: "SimulatedSource", center_hz: float, lo_hz: float, channels_hz: np.ndarray,
                   channel_bw_hz: float, emitters: Sequence[Emitter], time_s: float) -> list[ChannelTruth]:
    """One :class:`ChannelTruth` per channel of a hop (see the module docstring)."""
    freqs = np.atleast_1d(np.asarray(channels_hz, dtype=np.float64))
    if freqs.size == 0:
        return []
    chain = source.chain_truth(freqs)
    alpha2, q_density = adc_quantiser_model(source, center_hz, lo_hz, emitters)
    q = q_density * channel_bw_hz
    out = []
    for k, f in enumerate(freqs):
        fb = f - lo_hz
        lo_bb, hi_bb = fb - channel_bw_hz / 2.0, fb + channel_bw_hz / 2.0
        sig, thermal, names = band_power(source, lo_hz, emitters, lo_bb, hi_bb, center_hz)
        sig *= alpha2
        thermal *= alpha2
        noise = thermal + q
        out.append(ChannelTruth(
            freq_hz=float(f), center_hz=center_hz, time_s=float(time_s),
            signal_dbfs=float(ratio_to_db(sig)), noise_dbfs=float(ratio_to_db(noise)),
            cn_db=float(ratio_to_db(sig / noise)),
            noise_density_dbfs_hz=float(ratio_to_db(noise / channel_bw_hz)),
            thermal_dbfs=float(ratio_to_db(thermal)), quantisation_dbfs=float(ratio_to_db(q)),
            gain_db=float(chain.gain_db[k]), input_temp_k=float(chain.input_temp_k[k]),
            ta_k=float(chain.ta_k[k]), tp_k=float(chain.tp_k), tr_k=float(chain.tr_k),
            supply_k=float(chain.supply_k), rx_input_temp_k=float(chain.rx_input_temp_k[k]),
            system_temp_k=float(chain.system_temp_k[k]), emitters=names,
        ))
    return out
