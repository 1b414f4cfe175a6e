"""The simulated RF world: stations, outside noise, inputs, preamps and the receiver.

A scene is a TOML file (read by :mod:`survey.scene_toml` with :mod:`tomllib`) in physical units:
station levels in dBm at the antenna terminals, temperatures in K, noise figures and gains in
dB, frequencies in Hz (``freq_mhz`` is accepted for stations as a convenience). This module
holds the model and the chain arithmetic; :mod:`survey.sources.simulated` renders IQ from it.

Chain (every temperature is a noise temperature, power density ``k T``)::

    input (antenna: Ta + stations | terminated: Tamb | noise source: T0 (1+ENR) or Tamb)
      -> preamp G(f), its own noise Tp added at its input (so shaped by G)
      -> + supply noise Ts (broadband, at its output) + oscillation line (CW)
      -> + receiver noise Tr -> receiver roll-off -> dBFS -> DC, IQ imbalance -> 8-bit ADC

so the density at the receiver input is ``k [G (Tin + Tp) + Ts + Tr]`` and the system noise
temperature referred to the chain input is ``Tin + Tp + (Ts + Tr)/G`` (Friis 1944).

References
----------
.. [1] H. T. Friis, "Noise figures of radio receivers", Proc. IRE 32, 419-422, 1944.
.. [2] ITU-R P.372 (Radio noise), section 5, Table 1: median man-made noise
       ``Fa = c - d log10(f_MHz)`` dB above ``k T0 b``.
.. [3] IEEE Std 161 definitions: ``F = 1 + Te/T0``, ``T0 = 290 K``; ``ENR = (Th - T0)/T0``.
.. [4] Maximally flat stagger tuning: stage k has half-bandwidth ``(B/2) sin(theta_k)`` and
       offset ``(B/2) cos(theta_k)``, ``theta_k = (2k-1) pi / (2n)`` (attributed to Valley &
       Wallman, *Vacuum Tube Amplifiers*, 1948).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path

import numpy as np

from survey.errors import SceneError
from survey.rds.waveform import RdsProgramme
from survey.trimmer import TrimmerSchedule
from survey.units import T0_K, db_to_ratio, nf_db_to_k, ratio_to_db

#: ITU-R P.372 median external noise: environment -> (c, d) with Fa = c - d log10(f_MHz) dB.
#: Coefficients from ITU-R SG3's reference implementation of P.372 (P.372-10 section 5, Table 1).
ITU_ENVIRONMENTS: dict[str, tuple[float, float]] = {
    "city": (76.8, 27.7),
    "residential": (72.5, 27.7),
    "rural": (67.2, 27.7),
    "quiet rural": (53.6, 28.6),
    "galactic": (52.0, 23.0),
}

#: Inputs the simulator can present to the chain (a subset of survey.records.INPUT_KINDS).
SIM_INPUTS = ("antenna", "terminated", "noise-hot", "noise-cold")

#: Configuration label meaning "no preamp in the chain".
BARE = "bare"


# ----------------------------------------------------------------------------------------
# Model records
# ----------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Fading:
    """Log-normal slow fading: an Ornstein-Uhlenbeck process in dB.

    ``time_constant_s`` is the correlation time, ``spread_db`` the stationary standard deviation
    of the level in dB. ``spread_db = 0`` means a steady level.
    """

    time_constant_s: float = 600.0
    spread_db: float = 0.0


@dataclass(frozen=True)
class Station:
    """One FM broadcast station as received at the antenna terminals.

    ``rds_pi`` (16-bit code), ``rds_ps`` (up to 8 characters) and ``rds_pty`` (0..31) describe
    the RDS it sends; all None for a station without RDS.
    """

    name: str
    freq_hz: float
    level_dbm: float
    stereo: bool = True
    fading: Fading = field(default_factory=Fading)
    deviation_hz: float = 75_000.0
    rds_pi: int | None = None
    rds_ps: str | None = None
    rds_pty: int | None = None

    @property
    def rds(self) -> RdsProgramme | None:
        """What the station sends on RDS (None when it sends no RDS: ``rds_pi`` is None)."""
        if self.rds_pi is None:
            return None
        return RdsProgramme(pi=self.rds_pi, ps=self.rds_ps or "", pty=self.rds_pty or 0)


@dataclass(frozen=True)
class TunedCircuit:
    """A parallel tuned circuit of loaded quality factor ``q`` resonant at ``f0_hz``."""

    f0_hz: float
    q: float

    def power_response(self, freq_hz: np.ndarray) -> np.ndarray:
        """``|H|^2 = 1 / (1 + Q^2 (f/f0 - f0/f)^2)`` (unity at resonance)."""
        f = np.asarray(freq_hz, dtype=np.float64)
        x = f / self.f0_hz - self.f0_hz / f
        return 1.0 / (1.0 + (self.q * x) ** 2)


@dataclass(frozen=True)
class Oscillation:
    """An unmodulated carrier (a preamp oscillating) at the preamp output."""

    freq_hz: float
    level_dbm: float


@dataclass(frozen=True)
class Preamp:
    """A tuned VHF preamplifier.

    Parameters
    ----------
    gain_db : float
        Gain at the peak of the cascade of tuned circuits (the response is normalised to it).
    nf_db : float
        Noise figure; its temperature ``Tp`` is added at the input and shaped by ``G(f)``.
    iip3_dbm : float or None
        Input third-order intercept; None for an ideal linear amplifier.
    supply_noise_k : float
        Broadband noise at the output, referred to the receiver input (not shaped by G).
    trimmer : TrimmerSchedule or None
        Circuits moving with simulated time (someone turning the trimmers); ``circuits`` is then
        the tuning at time 0 and :meth:`at_time` gives the tuning at any time.
    """

    name: str
    circuits: tuple[TunedCircuit, ...]
    gain_db: float
    nf_db: float
    iip3_dbm: float | None = None
    supply_noise_k: float = 0.0
    oscillation: Oscillation | None = None
    trimmer: TrimmerSchedule | None = None

    def at_time(self, t_s: float) -> "Preamp":
        """This preamp with its circuits where the trimmer schedule has them at ``t_s`` (itself if none)."""
        if self.trimmer is None:
            return self
        tuned = tuple(TunedCircuit(f0, q) for f0, q in self.trimmer.tuning_at(t_s))
        return Preamp(self.name, tuned, self.gain_db, self.nf_db, self.iip3_dbm, self.supply_noise_k,
                      self.oscillation, None)

    @property
    def tp_k(self) -> float:
        """Noise temperature of the preamp, ``T0 (10**(NF/10) - 1)`` K (IEEE Std 161)."""
        return float(nf_db_to_k(self.nf_db))

    def shape(self, freq_hz: np.ndarray) -> np.ndarray:
        """Cascade power response normalised to 1 at its peak (linear)."""
        f = np.asarray(freq_hz, dtype=np.float64)
        out = np.ones_like(f)
        for c in self.circuits:
            out = out * c.power_response(f)
        return out / self._peak_response

    @cached_property
    def _peak_response(self) -> float:
        lo = min(c.f0_hz for c in self.circuits) * 0.8
        hi = max(c.f0_hz for c in self.circuits) * 1.25
        grid = np.linspace(lo, hi, 20001)
        resp = np.ones_like(grid)
        for c in self.circuits:
            resp = resp * c.power_response(grid)
        k = int(np.argmax(resp))
        fine = np.linspace(grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)], 2001)
        r2 = np.ones_like(fine)
        for c in self.circuits:
            r2 = r2 * c.power_response(fine)
        return float(max(resp[k], r2.max()))

    def gain_lin(self, freq_hz: np.ndarray) -> np.ndarray:
        """Power gain ``G(f)`` (linear): peak gain times the normalised cascade response."""
        return db_to_ratio(self.gain_db) * self.shape(freq_hz)


@dataclass(frozen=True)
class Receiver:
    """The USB receiver: noise, conversion to full scale and its imperfections.

    ``full_scale_dbm`` is the input power (dBm) of a complex exponential that reaches 0 dBFS at
    the gain setting ``gain_db``. ``dc_offset`` is added in full-scale units (I, Q); IQ imbalance
    makes an image at ``-f`` (``y = mu x + nu conj(x)``); ``ppm`` shifts every frequency by
    ``ppm * 1e-6 * f_LO`` downwards (a local oscillator running fast). The anti-alias roll-off
    is flat to ``rolloff_start_fraction * fs/2``, then falls smoothly (raised cosine in dB) to
    ``-rolloff_edge_db`` at ``fs/2``.
    """

    nf_db: float = 7.0
    gain_db: float = 29.7
    full_scale_dbm: float = -57.0
    dc_offset: tuple[float, float] = (0.004, -0.003)
    amplitude_imbalance_db: float = 0.1
    phase_imbalance_deg: float = 1.0
    ppm: float = 0.0
    rolloff_start_fraction: float = 0.8
    rolloff_edge_db: float = 30.0

    @property
    def tr_k(self) -> float:
        """Receiver noise temperature in K."""
        return float(nf_db_to_k(self.nf_db))

    @property
    def iq_mu_nu(self) -> tuple[complex, complex]:
        """Coefficients of ``y = mu x + nu conj(x)`` for the amplitude/phase imbalance."""
        g = 10.0 ** (self.amplitude_imbalance_db / 20.0)
        phi = math.radians(self.phase_imbalance_deg)
        mu = (1.0 + g * complex(math.cos(-phi), math.sin(-phi))) / 2.0
        nu = (1.0 - g * complex(math.cos(phi), math.sin(phi))) / 2.0
        return mu, nu

    def rolloff(self, baseband_hz: np.ndarray, sample_rate_hz: float) -> np.ndarray:
        """Power response of the anti-alias filter at baseband offsets (linear, 1 in the flat part)."""
        fb = np.abs(np.asarray(baseband_hz, dtype=np.float64))
        half = sample_rate_hz / 2.0
        f1 = self.rolloff_start_fraction * half
        u = np.clip((fb - f1) / max(half - f1, 1e-9), 0.0, 1.0)
        atten_db = self.rolloff_edge_db * (1.0 - np.cos(np.pi * u)) / 2.0
        # held at -rolloff_edge_db beyond fs/2 (those offsets are never sampled)
        return np.power(10.0, -atten_db / 10.0)


@dataclass(frozen=True)
class NoiseSource:
    """A calibrated noise source: ENR in dB, flat or a table of (freq_hz, enr_db)."""

    enr_db: float | None = 15.0
    enr_table: tuple[tuple[float, float], ...] = ()

    def enr_db_at(self, freq_hz: np.ndarray) -> np.ndarray:
        """ENR in dB at ``freq_hz`` (linear interpolation in the table, held at its ends)."""
        f = np.asarray(freq_hz, dtype=np.float64)
        if self.enr_table:
            fs, es = zip(*self.enr_table)
            return np.interp(f, np.asarray(fs, float), np.asarray(es, float))
        return np.full_like(f, float(self.enr_db))

    def hot_k(self, freq_hz: np.ndarray) -> np.ndarray:
        """Hot temperature ``T0 (1 + ENR)`` in K (ENR defined against T0 = 290 K, IEEE Std 161)."""
        return T0_K * (1.0 + db_to_ratio(self.enr_db_at(freq_hz)))


@dataclass(frozen=True)
class Scene:
    """A whole simulated world. Configurations: ``"bare"`` plus one per preamp."""

    name: str
    stations: tuple[Station, ...]
    receiver: Receiver
    preamps: dict[str, Preamp]
    environment: str | None = "rural"
    antenna_temp_k: float | None = None
    ambient_temp_k: float = 290.0
    noise_source: NoiseSource = field(default_factory=NoiseSource)
    description: str = ""

    @property
    def configurations(self) -> tuple[str, ...]:
        """Configuration labels this scene offers (``bare`` first)."""
        return (BARE, *sorted(self.preamps))

    def preamp(self, configuration: str) -> Preamp | None:
        """The preamp of a configuration (None for ``bare``); SceneError for an unknown label."""
        if configuration == BARE:
            return None
        if configuration not in self.preamps:
            raise SceneError(
                f"scene '{self.name}' has no configuration '{configuration}'; "
                f"choose one of {', '.join(self.configurations)}"
            )
        return self.preamps[configuration]

    @property
    def has_trimmers(self) -> bool:
        """True when some preamp's tuning changes with time."""
        return any(p.trimmer is not None for p in self.preamps.values())

    def at_time(self, t_s: float) -> "Scene":
        """The scene with every trimmer schedule applied at simulated time ``t_s`` (itself if none)."""
        if not self.has_trimmers:
            return self
        return replace(self, preamps={n: p.at_time(t_s) for n, p in self.preamps.items()})

    def without_rds(self) -> "Scene":
        """A copy in which no station sends RDS."""
        return replace(self, stations=tuple(replace(s, rds_pi=None, rds_ps=None, rds_pty=None)
                                            for s in self.stations))

    def with_station_levels(self, delta_db: float) -> "Scene":
        """A copy with every station level shifted by ``delta_db`` (for level sweeps)."""
        return replace(self, stations=tuple(replace(s, level_dbm=s.level_dbm + delta_db) for s in self.stations))


# ----------------------------------------------------------------------------------------
# Chain arithmetic
# ----------------------------------------------------------------------------------------


def itu_fa_db(environment: str, freq_hz: np.ndarray) -> np.ndarray:
    """Median external noise factor ``Fa = c - d log10(f_MHz)`` in dB (ITU-R P.372, Table 1)."""
    if environment not in ITU_ENVIRONMENTS:
        raise SceneError(
            f"unknown outside-noise environment '{environment}'; use one of "
            f"{', '.join(repr(e) for e in ITU_ENVIRONMENTS)} or give temp_k"
        )
    c, d = ITU_ENVIRONMENTS[environment]
    f_mhz = np.asarray(freq_hz, dtype=np.float64) / 1e6
    return c - d * np.log10(f_mhz)


def itu_ta_k(environment: str, freq_hz: np.ndarray) -> np.ndarray:
    """Antenna noise temperature from P.372: ``ta = 290 * 10**(Fa/10)`` K."""
    return T0_K * np.power(10.0, itu_fa_db(environment, freq_hz) / 10.0)


def stagger_tuned_circuits(center_hz: float, bandwidth_hz: float, stages: int) -> tuple[TunedCircuit, ...]:
    """Maximally flat stagger-tuned circuits covering ``bandwidth_hz`` around ``center_hz``.

    Stage k (1..n) has half-bandwidth ``(B/2) sin(theta_k)`` and offset ``(B/2) cos(theta_k)``,
    ``theta_k = (2k-1) pi / (2n)``; its loaded Q is its centre over its full 3 dB bandwidth.
    Narrow-band (low-pass prototype) result attributed to Valley & Wallman (1948).
    """
    if stages < 1 or bandwidth_hz <= 0 or center_hz <= bandwidth_hz / 2:
        raise SceneError(
            f"stagger tuning needs stages >= 1 and 0 < bandwidth < 2*center "
            f"(got stages={stages}, bandwidth_hz={bandwidth_hz}, center_hz={center_hz})"
        )
    half = bandwidth_hz / 2.0
    out = []
    for k in range(1, stages + 1):
        theta = (2 * k - 1) * math.pi / (2 * stages)
        f0 = center_hz + half * math.cos(theta)
        bw = 2.0 * half * math.sin(theta)
        out.append(TunedCircuit(f0_hz=f0, q=f0 / bw))
    return tuple(sorted(out, key=lambda c: c.f0_hz))


@dataclass(frozen=True)
class ChainTruth:
    """Chain quantities at ``freqs_hz`` (arrays, Hz and K; ``gain_db`` of the preamp).

    ``rx_input_temp_k = G (input_temp_k + tp_k) + supply_k + tr_k`` is the noise temperature at
    the receiver input; ``system_temp_k = rx_input_temp_k / G`` refers it to the chain input;
    ``chain_temp_k = tp_k + (supply_k + tr_k) / G`` is the preamp-plus-receiver noise
    temperature (Friis 1944).
    """

    freqs_hz: np.ndarray
    gain_db: np.ndarray
    input_temp_k: np.ndarray
    ta_k: np.ndarray
    tp_k: float
    tr_k: float
    supply_k: float
    rx_input_temp_k: np.ndarray
    system_temp_k: np.ndarray
    chain_temp_k: np.ndarray


def outside_ta_k(scene: Scene, freq_hz: np.ndarray) -> np.ndarray:
    """Antenna (outside) noise temperature of the scene at ``freq_hz``."""
    f = np.asarray(freq_hz, dtype=np.float64)
    if scene.antenna_temp_k is not None:
        return np.full_like(f, float(scene.antenna_temp_k))
    return itu_ta_k(scene.environment or "rural", f)


def input_temp_k(scene: Scene, input: str, freq_hz: np.ndarray) -> np.ndarray:
    """Noise temperature the chain input sees for ``input`` at ``freq_hz``."""
    f = np.asarray(freq_hz, dtype=np.float64)
    if input == "antenna":
        return outside_ta_k(scene, f)
    if input in ("terminated", "noise-cold"):
        return np.full_like(f, scene.ambient_temp_k)
    if input == "noise-hot":
        return scene.noise_source.hot_k(f)
    raise SceneError(f"the simulator has no input '{input}'; use one of {', '.join(SIM_INPUTS)}")


def chain_truth(scene: Scene, configuration: str, input: str, freqs_hz: np.ndarray) -> ChainTruth:
    """Gain and noise temperatures of the chain at ``freqs_hz`` (see :class:`ChainTruth`)."""
    f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
    pre = scene.preamp(configuration)
    g = np.ones_like(f) if pre is None else pre.gain_lin(f)
    tp = 0.0 if pre is None else pre.tp_k
    ts = 0.0 if pre is None else float(pre.supply_noise_k)
    tr = scene.receiver.tr_k
    tin = input_temp_k(scene, input, f)
    rx = g * (tin + tp) + ts + tr
    return ChainTruth(
        freqs_hz=f,
        gain_db=np.asarray(ratio_to_db(g), dtype=np.float64),
        input_temp_k=tin,
        ta_k=outside_ta_k(scene, f),
        tp_k=tp,
        tr_k=tr,
        supply_k=ts,
        rx_input_temp_k=rx,
        system_temp_k=rx / g,
        chain_temp_k=tp + (ts + tr) / g,
    )


# ----------------------------------------------------------------------------------------
# TOML loading (in survey.scene_toml; re-exported here)
# ----------------------------------------------------------------------------------------


def parse_scene(data: dict, name: str = "scene") -> Scene:
    """Build a :class:`Scene` from a decoded TOML document (see :mod:`survey.scene_toml`)."""
    from survey.scene_toml import parse_scene as _parse

    return _parse(data, name)


def load_scene(path: str | Path) -> Scene:
    """Read a scene TOML file; SceneError (with the fix) when it is missing or malformed."""
    from survey.scene_toml import load_scene as _load

    return _load(path)
