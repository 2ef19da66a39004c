"""Render a scenario: what each accelerometer of the machine sees at any moment of its timeline.

:class:`ScenarioRenderer` turns a loaded :class:`~rotorwatch.simulators.scenario.Scenario` into signals.
Every sample is a pure function of the scenario and its absolute time ``(n0 + i) / fs``: shaft tones
follow the integrated shaft angle, impacts land at instants that depend only on their number, noise is
drawn by absolute sample index. So snapshots can be taken at any time in any order, the same seed gives
the same signal, and :meth:`ScenarioRenderer.stream` cut into chunks equals one long render.

The acceleration at a point is the SUM of:

- shaft orders: 1x (``unbalance``), 2x (``misalignment``), 3x..8x (``looseness``, weights 1/(k-2),
  scaled so the six together have the given RMS); sizes are velocity RMS in mm/s;
- blade pass at blades x shaft speed with its 2nd and 3rd harmonics at 1/2 and 1/4 of the
  fundamental's velocity (``blade_pass``, mm/s RMS of the fundamental);
- bearing defects (``outer_race``, ``inner_race``, ``ball``), impact trains ringing the housing
  resonance, sized by peak impact acceleration in m/s^2 (see :mod:`~rotorwatch.simulators.impacts`);
- broadband machine noise (``noise``, m/s^2 RMS), coloured (``structure.noise_low_hz`` ..
  ``noise_high_hz``), Gaussian;
- 2xLF (``twice_line``, mm/s RMS): the motor's magnetic pull at twice the supply's line frequency, a
  fixed frequency that does not follow the shaft.

That sum is the housing's acceleration (:meth:`ScenarioRenderer.snapshot_accel`). What the input
records (:meth:`ScenarioRenderer.snapshot`, :meth:`ScenarioRenderer.stream`) has passed the measurement
chain first (mounted sensor resonance, AC coupling, anti-alias filter; :mod:`~rotorwatch.simulators.chain`)
and then the sensor and the input (:mod:`~rotorwatch.simulators.sensor`). Beyond the scenario's duration
the timeline holds its last state (noise, drift and phases keep running).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from rotorwatch.errors import InputError
from rotorwatch.settings.models import Config, Machine

from .chain import GAIN_BLOCK, ChainResponse, ChainSettings, ShapedNoise
from .components import BlockGain, ImpactKernel, ShaftPhasor, order_tone, ring
from .faults import FAULT_COMPONENTS, fault_tones, fixed_phases_rad, rotor_order, truncate
from .impacts import ImpactTrain
from .profile import Profile, Ramp
from .randomness import generator, stream_key, white_noise
from .rates import bearing_orders
from .scenario import BEARING_COMPONENTS, DAY_S, LEVEL_COMPONENTS, LEVEL_UNITS, Scenario, affected_points
from .sensor import FaultSpan, SensorChain
from .speed import SpeedModel

LOOSENESS_ORDERS = (3, 4, 5, 6, 7, 8)
_W = np.array([1.0 / (k - 2) for k in LOOSENESS_ORDERS])
LOOSENESS_WEIGHTS = tuple(_W / np.sqrt(np.sum(_W ** 2)))
BLADE_HARMONIC_WEIGHTS = (1.0, 0.5, 0.25)
TACH_PULSE_V = 0.9  # once-per-revolution pulse height on a tach channel
TACH_DUTY = 0.1


@dataclass(frozen=True)
class _Tone:
    order: float
    component: str
    weight: float
    phase_rad: float


def _ramp(change, value_factor: float = 1.0) -> Ramp:
    start = change.start_day * DAY_S
    end = (change.end_day if change.end_day is not None else change.start_day) * DAY_S
    return Ramp(start, end, change.to * value_factor, change.shape)


def _point_tones(machine: Machine, seed: int, fixed: dict[str, float] | None = None) -> dict[str, list[_Tone]]:
    """Each point's shaft-order tones (unbalance, misalignment, looseness, blade pass) with their fixed
    random phases; ``fixed``: a phase for a component's tones instead (faults.fixed_phases_rad)."""
    fixed = fixed or {}
    out = {}
    for p in machine.points:
        rng = generator(seed, stream_key("phases", p.id))
        tones = [_Tone(1, "unbalance", 1.0, 0.0), _Tone(2, "misalignment", 1.0, 0.0)]
        tones += [_Tone(k, "looseness", w, 0.0) for k, w in zip(LOOSENESS_ORDERS, LOOSENESS_WEIGHTS)]
        if machine.blades:
            rotor = rotor_order(machine)  # the bladed shaft: the driven one of a drive
            tones += [_Tone(machine.blades * (h + 1) * rotor, "blade_pass", w, 0.0)
                      for h, w in enumerate(BLADE_HARMONIC_WEIGHTS)]
        # the shaft, drive, flow and electrical faults' tones (faults.py)
        tones += [_Tone(o, c, w, 0.0) for c, pairs in fault_tones(machine, seed, p.id).items() for o, w in pairs]
        out[p.id] = [
            _Tone(t.order, t.component, t.weight, float(fixed.get(t.component, ph)))
            for t, ph in zip(tones, rng.uniform(0, 2 * math.pi, len(tones)))
        ]
    return out


class ScenarioRenderer:
    """Signals of one scenario. Cheap to query at any time; holds no per-call state."""

    def __init__(self, scenario: Scenario):
        self.scenario = scenario
        self.config: Config = scenario.config
        self.machine: Machine = scenario.machine
        spec = scenario.spec
        self.seed = spec.scenario.seed
        healthy, structure = spec.healthy, spec.structure
        hold = scenario.duration_s
        m = self.machine

        rpm0 = healthy.speed_rpm or m.speed.nominal_rpm
        speed_ramps = [_ramp(c) for c in spec.change if c.component == "speed_rpm"]
        self.speed = SpeedModel(Profile(rpm0, speed_ramps, hold), m.speed.nominal_rpm, healthy.speed_drift_pct,
                                self.seed, horizon_s=hold)

        # severity profiles per point: levels by component, bearing defects by (bearing, defect)
        initial = {c: getattr(healthy, f"{c}_{LEVEL_UNITS.get(c, 'mm_s')}") for c in LEVEL_COMPONENTS}
        level_ramps: dict[tuple[str, str], list[Ramp]] = {}
        defect_ramps: dict[tuple[str, str, str], list[Ramp]] = {}
        faults: dict[str, list[FaultSpan]] = {p.id: [] for p in m.points}
        for c in spec.change:
            if c.component == "speed_rpm":
                continue
            for pid, gain in affected_points(c, m, structure.cross_transfer).items():
                if c.component == "sensor":
                    # Change's validator asks a sensor fault for both
                    assert c.end_day is not None and c.fault is not None
                    end_s = c.end_day * DAY_S
                    end_s = math.inf if end_s >= hold else end_s  # active at the end: holds beyond it
                    faults[pid].append(FaultSpan(c.start_day * DAY_S, end_s, c.fault, c.fault_value))
                elif c.component in BEARING_COMPONENTS:
                    assert c.bearing is not None  # Change's validator asks a bearing component for it
                    defect_ramps.setdefault((pid, c.bearing, c.component), []).append(_ramp(c, gain))
                else:
                    level_ramps.setdefault((pid, c.component), []).append(_ramp(c))
        self._levels = {
            (p.id, c): Profile(initial[c], level_ramps.get((p.id, c), []), hold) for p in m.points for c in LEVEL_COMPONENTS
        }
        self._defects = {key: Profile(0.0, ramps, hold) for key, ramps in defect_ramps.items()}
        self._truncated = {p.id: healthy.truncation_depth > 0 or (p.id, "truncation") in level_ramps for p in m.points}

        self._tones = _point_tones(m, self.seed, fixed_phases_rad(healthy.unbalance_phase_deg,
                                                                  healthy.misalignment_phase_deg))

        # one impact train per (bearing, defect) that ever shows anywhere
        self.kernel = ImpactKernel(structure.resonance_hz, structure.damping_ratio)
        self._trains: dict[tuple[str, str], ImpactTrain] = {}
        for _, bearing_id, defect in self._defects:
            if (bearing_id, defect) not in self._trains:
                orders = bearing_orders(m.bearing(bearing_id))
                self._trains[(bearing_id, defect)] = ImpactTrain(
                    defect, orders.impact_order(defect), orders.load_zone_order(defect),
                    jitter=structure.slip_jitter_pct / 100.0, scatter=structure.impact_scatter_pct / 100.0,
                    load_zone_depth=structure.load_zone_depth, seed=self.seed, name=bearing_id,
                )
        # the measurement chain of each point (the sensor's configured AC coupling unless the scenario
        # says otherwise; 0.5 Hz when neither does) and its coloured machine noise
        chain = spec.chain
        self.chain_settings: dict[str, ChainSettings] = {}
        for p in m.points:
            ac = chain.ac_coupling_hz if chain.ac_coupling_hz is not None else (p.sensor.ac_coupling_corner_hz or 0.5)
            self.chain_settings[p.id] = ChainSettings(
                chain.mount_resonance_hz, chain.mount_damping_ratio, ac, chain.anti_alias_fraction,
                chain.anti_alias_order, structure.noise_low_hz, structure.noise_high_hz,
            )
        self._noise = {p.id: ShapedNoise(self.seed, stream_key("noise", p.id), self.chain_settings[p.id]) for p in m.points}
        self._responses: dict[tuple[str, float], ChainResponse] = {}
        self.line_frequency_hz = structure.line_frequency_hz or m.line_frequency_hz
        self._line_phase = {p.id: float(generator(self.seed, stream_key("line-phase", p.id)).uniform(0, 2 * math.pi))
                            for p in m.points}
        self._chains = {
            p.id: SensorChain(p.sensor, faults[p.id], structure.interface_noise_v, self.seed, p.id,
                              tau_s=self.chain_settings[p.id].tau_s)
            for p in m.points
        }
        self._floor_v = structure.interface_noise_v

    # ----------------------------------------------------------------------------------- timeline
    def times(self) -> np.ndarray:
        """Snapshot times in seconds from the start, one per ``cadence_s``, within the duration."""
        head = self.scenario.spec.scenario
        return np.arange(0.0, self.scenario.duration_s - 1e-9, head.cadence_s)

    def true_rpm(self, t_s):
        """The machine's actual speed at ``t_s`` (scalar or array), drift included."""
        r = self.speed.rpm(t_s)
        return float(r) if np.ndim(r) == 0 else r

    def severities(self, t_s: float) -> dict[str, dict[str, float]]:
        """What each point carries at ``t_s``: level components, defects as ``defect:bearing``, faults."""
        out: dict[str, dict[str, float]] = {}
        for p in self.machine.points:
            d = {c: float(self._levels[(p.id, c)].value(t_s)) for c in LEVEL_COMPONENTS}
            for (pid, bearing_id, defect), prof in self._defects.items():
                if pid == p.id:
                    d[f"{defect}:{bearing_id}"] = float(prof.value(t_s))
            t_hold = min(t_s, self.scenario.duration_s)
            for f in self._chains[p.id].faults:
                if f.start_s <= t_hold < f.end_s:
                    d[f"sensor:{f.fault}"] = f.value
            out[p.id] = d
        return out

    # ------------------------------------------------------------------------------------ signals
    def snapshot_accel(self, t_s: float, duration_s: float, fs_hz: float, *,
                       through_chain: bool = False) -> dict[str, np.ndarray]:
        """Acceleration in m/s^2 at each point from ``t_s`` for ``duration_s``: the housing's own (default),
        or as the measurement chain delivers it (``through_chain``: volts / sensitivity, before the
        sensor faults, the input's noise floor and its range)."""
        n0, n = self._grid(t_s, duration_s, fs_hz)
        return self._accel(n0, n, fs_hz, through_chain)

    def snapshot(self, t_s: float, duration_s: float, fs_hz: float) -> dict[str, np.ndarray]:
        """Sensor output in volts at each point from ``t_s`` for ``duration_s`` (faults applied)."""
        n0, n = self._grid(t_s, duration_s, fs_hz)
        accel = self._accel(n0, n, fs_hz, True)
        return {pid: self._chains[pid].volts(a, n0, fs_hz) for pid, a in accel.items()}

    def chain_response(self, point_id: str, fs_hz: float) -> ChainResponse:
        """The measurement chain of a point at a sample rate (complex response: call it with Hz)."""
        key = (point_id, float(fs_hz))
        if key not in self._responses:
            self._responses[key] = ChainResponse(self.chain_settings[point_id], float(fs_hz))
        return self._responses[key]

    def stream(self, fs_hz: float, chunk_frames: int, start_s: float = 0.0,
               channels: int | None = None) -> Iterator[tuple[float, np.ndarray]]:
        """Endless chunks ``(t0_s, frames)`` as an input device would deliver them.

        ``frames`` is float32 volts of shape ``(chunk_frames, channels)``; column c carries the point
        whose ``sensor.channel`` is c (a tach channel carries once-per-revolution pulses when the
        machine's speed mode is ``tach``; other columns the input's noise floor). ``t0_s`` is the
        scenario time of the first frame. Chunks are phase-continuous and equal one long render.
        """
        if chunk_frames < 1:
            raise InputError(f"chunk_frames = {chunk_frames}: must be at least 1")
        m = self.machine
        used = [p.sensor.channel for p in m.points]
        if m.speed.mode == "tach":
            used.append(m.speed.tach_channel)  # type: ignore[arg-type]
        if channels is None:
            channels = max(self.config.acquisition.channels, max(used) + 1)
        if channels < max(used) + 1:
            raise InputError(f"channels = {channels}: machine {m.id!r} uses input channel {max(used)}")
        n0, _ = self._grid(start_s, 0.0, fs_hz)
        while True:
            frames = np.empty((chunk_frames, channels), dtype=np.float32)
            volts = {pid: self._chains[pid].volts(a, n0, fs_hz)
                     for pid, a in self._accel(n0, chunk_frames, fs_hz, True).items()}
            for c in range(channels):
                frames[:, c] = self._channel(c, volts, n0, chunk_frames, fs_hz)
            yield n0 / fs_hz, frames
            n0 += chunk_frames

    # ---------------------------------------------------------------------------------- internals
    def _grid(self, t_s: float, duration_s: float, fs_hz: float) -> tuple[int, int]:
        if not (math.isfinite(fs_hz) and fs_hz > 0):
            raise InputError(f"fs_hz = {fs_hz}: must be a positive sample rate")
        if self._trains and fs_hz <= 2.2 * self.kernel.natural_hz:
            raise InputError(
                f"fs_hz = {fs_hz:g}: too low for the housing resonance at {self.kernel.natural_hz:g} Hz "
                f"(need more than {2.2 * self.kernel.natural_hz:g} Hz)"
            )
        if not (math.isfinite(t_s) and t_s >= 0):
            raise InputError(f"t_s = {t_s}: must be a time at or after the scenario start (0 s)")
        if not (math.isfinite(duration_s) and duration_s >= 0):
            raise InputError(f"duration_s = {duration_s}: must be zero or positive")
        return int(round(t_s * fs_hz)), int(round(duration_s * fs_hz))

    def _accel(self, n0: int, n: int, fs_hz: float, through_chain: bool = False) -> dict[str, np.ndarray]:
        t = (n0 + np.arange(n)) / fs_hz
        t_a, t_b = n0 / fs_hz, (n0 + n) / fs_hz
        turns, shaft_hz = self.speed.turns_and_hz(t)
        frac = turns - np.floor(turns)
        f_max = float(np.max(shaft_hz)) if n else 0.0
        nyquist = 0.5 * fs_hz
        events = {
            key: train.events(self.speed, t_a - self.kernel.length_s, t_b) for key, train in self._trains.items()
        } if n else {}
        phasor = ShaftPhasor(frac, shaft_hz)
        counts = shaft_blocks = None
        if through_chain and n:
            # the chain's response is held per absolute block of GAIN_BLOCK samples (chunk-independent)
            k0, k1 = n0 // GAIN_BLOCK, (n0 + n - 1) // GAIN_BLOCK
            edges = np.clip(np.arange(k0, k1 + 2) * GAIN_BLOCK - n0, 0, n)
            counts = np.diff(edges)
            shaft_blocks = np.atleast_1d(self.speed.shaft_hz((np.arange(k0, k1 + 1) + 0.5) * GAIN_BLOCK / fs_hz))
        out = {}
        for p in self.machine.points:
            resp = self.chain_response(p.id, fs_hz) if through_chain else None
            tones = []
            for tone in self._tones[p.id]:
                level = self._level(p.id, tone.component, t, t_a, t_b)
                if np.all(level == 0) or tone.order * f_max >= nyquist:
                    continue
                tones.append((tone, level))
            gains = None
            if resp is not None and shaft_blocks is not None and tones:
                g = resp(np.concatenate([tone.order * shaft_blocks for tone, _ in tones]))
                gains = g.reshape(len(tones), len(shaft_blocks))
            acc = np.zeros(n)
            for i, (tone, level) in enumerate(tones):
                gain = None
                if gains is not None and counts is not None:
                    gain = BlockGain(gains[i].real, gains[i].imag, counts, GAIN_BLOCK)
                if tone.component in FAULT_COMPONENTS or tone.order != int(tone.order):  # not whole: the full shaft angle
                    acc += order_tone(turns, shaft_hz, tone.order, tone.weight * level, tone.phase_rad,
                                      gain.per_sample() if gain is not None else None)
                elif tone.component == "unbalance" and self._truncated[p.id]:  # looseness: the 1x cut (faults.py)
                    acc += truncate(phasor.tone(tone.order, tone.weight * level, tone.phase_rad, gain),
                                    self._level(p.id, "truncation", t, t_a, t_b), tone.weight * level, tone.order, shaft_hz)
                else:
                    acc += phasor.tone(tone.order, tone.weight * level, tone.phase_rad, gain)
            line = self._level(p.id, "twice_line", t, t_a, t_b)
            if self.line_frequency_hz and np.any(line > 0) and 2.0 * self.line_frequency_hz < nyquist:
                acc += self._twice_line(p.id, line, n0, n, fs_hz, resp)
            noise = self._level(p.id, "noise", t, t_a, t_b)
            if np.any(noise > 0):
                acc += noise * self._noise[p.id].samples(n0, n, fs_hz, through_chain)
            for (pid, bearing_id, defect), prof in self._defects.items():
                if pid != p.id:
                    continue
                times, factor = events[(bearing_id, defect)]
                sizes = prof.value(times) * factor
                if np.any(sizes > 0):
                    ringing = ring(self.kernel, times, sizes, n0, n, fs_hz)
                    if resp is not None:  # narrow-band: the chain's gain at the housing resonance
                        ringing *= float(np.abs(resp(self.kernel.natural_hz))[0])
                    acc += ringing
            out[p.id] = acc
        return out

    def _twice_line(self, point_id: str, level_mm_s, n0: int, n: int, fs_hz: float,
                    resp: ChainResponse | None) -> np.ndarray:
        """2xLF: a tone at twice the line frequency on the absolute clock (not the shaft's)."""
        f = 2.0 * float(self.line_frequency_hz)  # type: ignore[arg-type]
        cycles = ((n0 + np.arange(n, dtype=np.int64)) * (f / fs_hz)) % 1.0
        theta = 2.0 * math.pi * cycles + self._line_phase[point_id]
        amp = math.sqrt(2.0) * (np.asarray(level_mm_s) / 1000.0) * 2.0 * math.pi * f
        if resp is None:
            return amp * np.cos(theta)
        g = complex(resp(f)[0])
        return amp * (np.cos(theta) * g.real - np.sin(theta) * g.imag)

    def _level(self, point_id: str, component: str, t: np.ndarray, t_a: float, t_b: float):
        prof = self._levels[(point_id, component)]
        return prof.value(t_a) if prof.is_constant(t_a, t_b) else prof.value(t)

    def _channel(self, c: int, volts: dict[str, np.ndarray], n0: int, n: int, fs_hz: float) -> np.ndarray:
        for p in self.machine.points:
            if p.sensor.channel == c:
                return volts[p.id]
        floor = self._floor_v * white_noise(self.seed, stream_key("floor-channel", str(c)), n0, n)
        m = self.machine
        if m.speed.mode == "tach" and m.speed.tach_channel == c:
            turns = self.speed.turns((n0 + np.arange(n)) / fs_hz) * m.speed.pulses_per_rev
            return floor + TACH_PULSE_V * ((turns - np.floor(turns)) < TACH_DUTY)
        return floor
