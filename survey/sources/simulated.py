"""A simulated receiver: renders 8-bit IQ from a :class:`~survey.scene.Scene` on a simulated clock.

The rendering follows the chain of :mod:`survey.scene` sample by sample: coloured thermal noise
``k T_rx(f)`` (FFT-domain shaping per hop), FM stations scaled by ``G(f)`` and slowly fading,
preamp intermodulation products, an oscillation line, the receiver roll-off, conversion to
full scale, IQ imbalance, DC offset and ``cu8`` quantisation with clipping at the rails.
:meth:`SimulatedSource.truth` gives the exact expected channel quantities for the same state,
which is what every estimator is tested against.

Known simplifications (documented, not hidden): carriers outside the Nyquist span of a hop are
not rendered (the anti-alias filter is assumed to remove them), the sample rate carries no ppm
error, the quantisation noise is taken as white (Bussgang gain and distortion of a Gaussian
input, :mod:`survey.sources.simulated_truth`), and a block whose carriers clip hard is not
covered by the truth.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta, timezone

import numpy as np
import scipy.fft
import scipy.signal

from survey import fm
from survey.errors import SceneError
from survey.records import IQBlock
from survey.scene import BARE, SIM_INPUTS, ChainTruth, Scene, chain_truth
from survey.sources.simulated_truth import ChannelTruth, Emitter, band_power, channel_truths
from survey.units import BOLTZMANN_J_PER_K, db_to_ratio, ratio_to_db

__all__ = ["SimulatedSource", "ChannelTruth", "SimulatedHop", "LSB_FS", "quantisation_density_fs2_hz"]

#: One quantisation step of ``cu8`` in full-scale units.
LSB_FS = 1.0 / 127.5
#: Default number of samples per read when the caller gives None (0.1 s at 2.4 MS/s).
_DEFAULT_READ_S = 0.1
#: IM3 products weaker than the channel noise by more than this are not rendered.
_IM3_RENDER_BELOW_NOISE_DB = 40.0


def quantisation_density_fs2_hz(sample_rate_hz: float) -> float:
    """Uniform quantisation noise density of ``cu8``: ``2 (LSB^2/12) / fs`` in FS^2/Hz.

    Each rail has step ``1/127.5`` and error variance ``step^2/12`` (uniform model, valid for a
    per-rail RMS of at least half a step); I and Q add, spread over ``fs``.
    """
    return 2.0 * (LSB_FS**2 / 12.0) / float(sample_rate_hz)


@dataclass(frozen=True)
class SimulatedHop:
    """One read of the simulated source: where, when (simulated seconds) and how long."""

    center_hz: float
    started_s: float
    n_samples: int
    started_utc: str
    configuration: str
    input: str


class _FadingTrack:
    """Ornstein-Uhlenbeck level (dB) of one station, on a grid of tau/20, extended lazily.

    The path depends only on the seed and the station index, never on the query order.
    """

    def __init__(self, seed: int, index: int, tau_s: float, spread_db: float):
        self.tau_s = float(tau_s)
        self.spread_db = float(spread_db)
        self.dt_s = self.tau_s / 20.0
        self._rng = np.random.default_rng([int(seed), 7, int(index)])
        self._path = np.array([self._rng.standard_normal() * self.spread_db]) if spread_db > 0 else np.zeros(1)

    def level_db(self, t_s: float) -> float:
        if self.spread_db <= 0.0:
            return 0.0
        k = int(t_s // self.dt_s) + 2
        if k >= self._path.size:
            need = k - self._path.size + 256
            a = np.exp(-self.dt_s / self.tau_s)
            shocks = self._rng.standard_normal(need) * self.spread_db * np.sqrt(1.0 - a * a)
            # x[k] = a x[k-1] + shock[k]: a first-order recursion, run by lfilter
            ext, _ = scipy.signal.lfilter([1.0], [1.0, -a], shocks, zi=[a * self._path[-1]])
            self._path = np.concatenate([self._path, ext])
        u = t_s / self.dt_s
        i = int(u)
        return float(self._path[i] + (u - i) * (self._path[i + 1] - self._path[i]))


class SimulatedSource:
    """IQ source rendering a scene through one configuration and input (kind ``"simulated"``).

    Parameters
    ----------
    scene : Scene
        The simulated world.
    configuration : str
        ``"bare"`` or the name of one of the scene's preamps.
    input : str
        ``"antenna"``, ``"terminated"``, ``"noise-hot"`` or ``"noise-cold"``.
    seed : int
        Master seed; every hop's randomness derives from it and the hop's simulated time and
        centre, so a sweep is reproducible and does not depend on what was read before.
    sample_rate_hz : float
        Sample rate, Hz.
    settle_s : float
        Simulated time spent by every :meth:`tune`.
    epoch_utc : str
        UTC time of simulated second 0 (ISO 8601, ``Z``).
    """

    kind = "simulated"

    def __init__(self, scene: Scene, configuration: str, input: str = "antenna", seed: int = 0,
                 sample_rate_hz: float = 2.4e6, settle_s: float = 0.0,
                 epoch_utc: str = "2026-06-01T20:00:00Z"):
        if not (np.isfinite(sample_rate_hz) and sample_rate_hz > 0):
            raise SceneError(f"sample rate {sample_rate_hz!r} Hz is not positive; use e.g. 2.4e6")
        if settle_s < 0:
            raise SceneError(f"settle time {settle_s} s is negative; use 0 or more")
        self.scene = scene
        self._static_scene = scene  # self.scene follows its trimmer schedules, if any
        self._tuned_scenes: dict[tuple, Scene] = {}
        self.seed = int(seed)
        self._fs = float(sample_rate_hz)
        self.settle_s = float(settle_s)
        try:
            text = epoch_utc.strip()
            self._epoch = datetime.fromisoformat(text[:-1] + "+00:00" if text.endswith("Z") else text)
        except ValueError as exc:
            raise SceneError(f"epoch '{epoch_utc}' is not ISO 8601; give e.g. 2026-06-01T20:00:00Z") from exc
        if self._epoch.tzinfo is None:
            self._epoch = self._epoch.replace(tzinfo=timezone.utc)
        self._time_s = 0.0
        self._center_hz: float | None = None
        self._closed = False
        self.history: list[SimulatedHop] = []
        self._fading = [
            _FadingTrack(self.seed, i, s.fading.time_constant_s, s.fading.spread_db)
            for i, s in enumerate(scene.stations)
        ]
        self._noise_cache: dict[tuple, np.ndarray] = {}
        self._grid_cache: dict[int, tuple] = {}
        self.set_chain(configuration, input)

    # -- protocol ----------------------------------------------------------------------------
    @property
    def sample_rate_hz(self) -> float:
        """Sample rate, Hz."""
        return self._fs

    @property
    def fixed_centers_hz(self) -> None:
        """None: the simulated receiver tunes anywhere."""
        return None

    @property
    def time_s(self) -> float:
        """Simulated seconds since the epoch."""
        return self._time_s

    @property
    def configuration(self) -> str:
        """Current configuration label."""
        return self._configuration

    @property
    def input(self) -> str:
        """Current input label."""
        return self._input

    def describe(self) -> dict:
        """Description for the runs table: scene, seed, chain and the SIMULATED label."""
        r = self.scene.receiver
        return {
            "device": "SIMULATED receiver (no hardware)",
            "label": "SIMULATED",
            "scene": self.scene.name,
            "seed": self.seed,
            "configuration": self._configuration,
            "input": self._input,
            "sample_rate_hz": self._fs,
            "receiver": {"nf_db": r.nf_db, "gain_db": r.gain_db, "full_scale_dbm": r.full_scale_dbm,
                         "ppm": r.ppm},
            "epoch_utc": self._epoch.strftime("%Y-%m-%dT%H:%M:%S.%fZ"),
        }

    def tune(self, center_hz: float) -> None:
        """Tune to ``center_hz`` (Hz); the simulated clock advances by the settle time."""
        self._check_open()
        c = float(center_hz)
        if not (np.isfinite(c) and c > self._fs / 2):
            raise SceneError(f"cannot tune the simulated receiver to {center_hz!r} Hz; give a centre above fs/2")
        self._center_hz = c
        self._time_s += self.settle_s

    def read(self, n_samples: int | None) -> IQBlock:
        """Render ``n_samples`` (None: 0.1 s) at the tuned centre; the clock advances by n/fs."""
        self._check_open()
        if self._center_hz is None:
            raise SceneError("read() before tune(); tune the simulated receiver to a centre first")
        n = int(round(_DEFAULT_READ_S * self._fs)) if n_samples is None else int(n_samples)
        if n < 1:
            raise SceneError(f"cannot read {n_samples!r} samples; ask for at least one")
        t0 = self._time_s
        raw = self.render_cu8(self._center_hz, n, t0)
        started = self.utc_at(t0)
        self.history.append(SimulatedHop(self._center_hz, t0, n, started, self._configuration, self._input))
        self._time_s += n / self._fs
        return IQBlock(center_hz=self._center_hz, sample_rate_hz=self._fs, datatype="cu8",
                       raw=raw, started_utc=started)

    def close(self) -> None:
        """Nothing to release; later reads raise. Safe to call twice."""
        self._closed = True

    # -- simulation controls ---------------------------------------------------------------------
    def advance(self, seconds: float) -> None:
        """Let simulated time pass (e.g. between sweeps)."""
        if seconds < 0:
            raise SceneError(f"cannot advance the simulated clock by {seconds} s; give 0 or more")
        self._time_s += float(seconds)

    def set_chain(self, configuration: str, input: str = "antenna") -> None:
        """Switch configuration and input (alternating runs); SceneError for unknown labels."""
        self.scene.preamp(configuration)  # validates the label
        if input not in SIM_INPUTS:
            raise SceneError(f"the simulator has no input '{input}'; use one of {', '.join(SIM_INPUTS)}")
        self._configuration = configuration
        self._input = input

    def utc_at(self, t_s: float) -> str:
        """UTC timestamp of simulated second ``t_s`` (format of :func:`survey.store.utc_now`)."""
        return (self._epoch + timedelta(seconds=float(t_s))).strftime("%Y-%m-%dT%H:%M:%S.%fZ")

    def _apply_tuning(self, t_s: float) -> None:
        """Point :attr:`scene` at the scene's tuning at ``t_s`` (preamps with a trimmer schedule)."""
        static = self._static_scene
        if not static.has_trimmers:
            return
        key = tuple(p.trimmer.tuning_at(t_s) if p.trimmer else () for p in static.preamps.values())
        scene = self._tuned_scenes.get(key)
        if scene is None:
            if len(self._tuned_scenes) > 256:
                self._tuned_scenes.clear()
            scene = self._tuned_scenes[key] = static.at_time(t_s)
        self.scene = scene

    def _check_open(self) -> None:
        if self._closed:
            raise SceneError("the simulated source is closed; create a new SimulatedSource")

    # -- chain -------------------------------------------------------------------------------------
    def chain_truth(self, freqs_hz) -> ChainTruth:
        """Gain ``G(f)`` and noise temperatures of the current chain at ``freqs_hz`` (Hz)."""
        return chain_truth(self.scene, self._configuration, self._input, np.asarray(freqs_hz, float))

    def lo_hz(self, center_hz: float) -> float:
        """True local-oscillator frequency for a requested centre (``center (1 + ppm 1e-6)``)."""
        return float(center_hz) * (1.0 + self.scene.receiver.ppm * 1e-6)

    def _full_scale_mw(self) -> float:
        return float(db_to_ratio(self.scene.receiver.full_scale_dbm))

    def noise_density_fs2_hz(self, center_hz: float, baseband_hz: np.ndarray,
                             rolloff: np.ndarray | None = None) -> np.ndarray:
        """Thermal noise density at the ADC before IQ imbalance, FS^2/Hz, incl. roll-off.

        ``k T_rx(f) R(fb) * 1e3 / P_fs(mW)`` with ``f = fb + f_LO`` (``rolloff``: R precomputed).
        """
        fb = np.asarray(baseband_hz, dtype=np.float64)
        rx = self.chain_truth(fb + self.lo_hz(center_hz)).rx_input_temp_k
        roll = self.scene.receiver.rolloff(fb, self._fs) if rolloff is None else rolloff
        return BOLTZMANN_J_PER_K * rx * 1e3 * roll / self._full_scale_mw()

    def _baseband_grid(self, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """FFT-order baseband frequencies, roll-off R and sqrt(R) (float32) for blocks of n."""
        grid = self._grid_cache.get(n)
        if grid is None:
            fb = scipy.fft.fftfreq(n, 1.0 / self._fs)
            roll = self.scene.receiver.rolloff(fb, self._fs)
            grid = (fb, roll, np.sqrt(roll).astype(np.float32))
            self._grid_cache = {n: grid}
        return grid

    def _station_levels_dbm(self, t_s: float) -> np.ndarray:
        return np.array([s.level_dbm + self._fading[i].level_db(t_s) for i, s in enumerate(self.scene.stations)])

    def emitters(self, t_s: float) -> list[Emitter]:
        """Every narrow signal at the receiver input at simulated time ``t_s`` (stations, IM3, CW)."""
        pre = self.scene.preamp(self._configuration)
        out: list[Emitter] = []
        stations = self.scene.stations
        if self._input == "antenna" and stations:
            levels = self._station_levels_dbm(t_s)
            freqs = np.array([s.freq_hz for s in stations])
            gain_db = np.zeros(freqs.size) if pre is None else np.asarray(ratio_to_db(pre.gain_lin(freqs)))
            for i, s in enumerate(stations):
                out.append(Emitter(s.name, s.freq_hz, float(levels[i] + gain_db[i]),
                                   ("station", bool(s.stereo), float(s.deviation_hz)), (i,)))
            if pre is not None and pre.iip3_dbm is not None and len(stations) > 1:
                out.extend(self._im3_emitters(pre, levels, freqs))
        if pre is not None and pre.oscillation is not None:
            o = pre.oscillation
            out.append(Emitter("oscillation", o.freq_hz, o.level_dbm, ("cw",), ()))
        return out

    def _im3_emitters(self, pre, levels_dbm: np.ndarray, freqs_hz: np.ndarray) -> list[Emitter]:
        """Third-order products ``2 f1 - f2``: ``P = 2 P1 + P2 - 2 IIP3`` referred to the input.

        ``P1, P2`` are the stations' levels weighted by the normalised tuned-circuit response
        (the tone levels the active device sees); the product then passes ``G(f_IM3)``. For a
        pair of equal tones this is ``3 P - 2 IIP3`` (third-order intercept definition; the
        ``2 f1 - f2`` term of ``a3 x^3`` has amplitude ``(3/4) a3 A1^2 A2``).
        """
        weighted = levels_dbm + np.asarray(ratio_to_db(pre.shape(freqs_hz)))
        st = self.scene.stations
        out = []
        for i in range(len(st)):
            for j in range(len(st)):
                if i == j:
                    continue
                f_im = 2.0 * freqs_hz[i] - freqs_hz[j]
                if f_im <= 0:
                    continue
                p_in = 2.0 * weighted[i] + weighted[j] - 2.0 * pre.iip3_dbm
                p_out = p_in + float(ratio_to_db(pre.gain_lin(np.array([f_im])))[0])
                ct = chain_truth(self.scene, self._configuration, self._input, np.array([f_im]))
                noise_dbm = float(ratio_to_db(BOLTZMANN_J_PER_K * ct.rx_input_temp_k[0] * 1e3 * 200e3))
                if p_out < noise_dbm - _IM3_RENDER_BELOW_NOISE_DB:
                    continue
                kind = ("im3", bool(st[i].stereo), float(st[i].deviation_hz), bool(st[j].stereo),
                        float(st[j].deviation_hz))
                out.append(Emitter(f"IM3 2x{st[i].name}-{st[j].name}", f_im, p_out, kind, (i, j)))
        return out

    # -- rendering ---------------------------------------------------------------------------------
    def _hop_rng(self, center_hz: float, t_s: float, tag: int) -> np.random.Generator:
        return np.random.default_rng([self.seed, int(round(t_s * 1e6)), int(round(center_hz)), tag])

    def _noise_amplitude(self, center_hz: float, n: int) -> np.ndarray:
        pre = self.scene.preamp(self._configuration)
        key = (self._configuration, self._input, float(center_hz), n, None if pre is None else pre.circuits)
        amp = self._noise_cache.get(key)
        if amp is None:
            fb, roll, _ = self._baseband_grid(n)
            density = self.noise_density_fs2_hz(center_hz, fb, roll)
            # E|X_k|^2 = n fs S(f_k) for x = ifft(X): complex Gaussian with half that per part
            amp = np.sqrt(n * self._fs * density / 2.0).astype(np.float32)
            if len(self._noise_cache) > 64:
                self._noise_cache.clear()
            self._noise_cache[key] = amp
        return amp

    def render_complex(self, center_hz: float, n: int, t_s: float) -> np.ndarray:
        """The block at full scale before quantisation (complex64), incl. DC and IQ imbalance."""
        fs = self._fs
        self._apply_tuning(t_s)
        lo = self.lo_hz(center_hz)
        rng = self._hop_rng(center_hz, t_s, 0)
        amp = self._noise_amplitude(center_hz, n)
        g = rng.standard_normal((2, n), dtype=np.float32)
        spec = np.empty(n, dtype=np.complex64)
        spec.real = g[0] * amp
        spec.imag = g[1] * amp

        emitters = [e for e in self.emitters(t_s) if abs(e.freq_hz - lo) < fs / 2.0]
        if emitters:
            sig = np.zeros(n, dtype=np.complex64)
            phases: dict[int, np.ndarray] = {}

            def phase_of(i: int) -> np.ndarray:
                if i not in phases:
                    s = self.scene.stations[i]
                    prng = self._hop_rng(center_hz, t_s, 1000 + i)
                    phases[i] = fm.station_phase(prng, n, fs, bool(s.stereo), float(s.deviation_hz), s.rds)
                return phases[i]

            fsm = self._full_scale_mw()
            for e in emitters:
                a = float(np.sqrt(db_to_ratio(e.power_dbm) / fsm))
                if e.kind[0] == "station":
                    ph = phase_of(e.sources[0])
                elif e.kind[0] == "im3":
                    ph = 2.0 * phase_of(e.sources[0]) - phase_of(e.sources[1])
                else:
                    ph = np.full(n, self._hop_rng(center_hz, t_s, 999).uniform(0, 2 * np.pi))
                sig += fm.carrier(ph, e.freq_hz - lo, fs, a)
            spec += scipy.fft.fft(sig) * self._baseband_grid(n)[2]
        x = scipy.fft.ifft(spec).astype(np.complex64, copy=False)
        mu, nu = self.scene.receiver.iq_mu_nu
        dc = complex(*self.scene.receiver.dc_offset)
        y = np.complex64(mu) * x + np.complex64(nu) * np.conj(x) + np.complex64(dc)
        return y.astype(np.complex64, copy=False)

    def render_cu8(self, center_hz: float, n: int, t_s: float) -> np.ndarray:
        """The block as the receiver delivers it: ``round(127.5 + 127.5 x)`` clipped to 0..255."""
        y = self.render_complex(center_hz, n, t_s)
        flat = y.view(np.float32)
        q = np.rint(flat * np.float32(127.5) + np.float32(127.5))
        np.clip(q, 0.0, 255.0, out=q)
        return q.astype(np.uint8)

    # -- truth -------------------------------------------------------------------------------------
    def _truth_time(self, center_hz: float, at_s: float | None) -> float:
        t = self._time_s
        if at_s is not None:
            t = float(at_s)
        else:
            for h in reversed(self.history):
                if h.center_hz == float(center_hz) and h.configuration == self._configuration and h.input == self._input:
                    t = h.started_s
                    break
        self._apply_tuning(t)
        return t

    def truth(self, center_hz: float, channels_hz, channel_bw_hz: float = 200_000.0,
              at_s: float | None = None) -> list[ChannelTruth]:
        """Expected channel quantities for a hop at ``center_hz`` (see :class:`ChannelTruth`).

        The time (for fading) is ``at_s`` if given, else the start of the latest read at this
        centre with the current chain, else the current simulated time.
        """
        t = self._truth_time(center_hz, at_s)
        lo = self.lo_hz(center_hz)
        return channel_truths(
            source=self, center_hz=float(center_hz), lo_hz=lo, channels_hz=np.asarray(channels_hz, float),
            channel_bw_hz=float(channel_bw_hz), emitters=[e for e in self.emitters(t) if abs(e.freq_hz - lo) < self._fs / 2.0],
            time_s=t,
        )

    def band_signal_power_fs2(self, center_hz: float, lo_bb_hz: float, hi_bb_hz: float,
                              at_s: float | None = None) -> float:
        """Signal power (FS^2, after roll-off and IQ imbalance) between two baseband offsets."""
        t = self._truth_time(center_hz, at_s)
        lo = self.lo_hz(center_hz)
        em = [e for e in self.emitters(t) if abs(e.freq_hz - lo) < self._fs / 2.0]
        return band_power(self, lo, em, lo_bb_hz, hi_bb_hz)[0]

    @property
    def is_bare(self) -> bool:
        """True when no preamp is in the chain."""
        return self._configuration == BARE
