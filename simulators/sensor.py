"""From the chain's acceleration to the volts an input records: sensitivity, faults, noise floor, range.

``accel`` here is what the measurement chain delivers (mounted resonance, AC coupling and anti-alias
filter already applied; :mod:`rotorwatch.simulators.chain`). Then, in the order a real installation
applies it::

    volts = accel * sensor.volts_per_m_s2        the accelerometer (0 while the cable is unplugged)
          + bias change                          bias_step fault: the sensor's output shifts by `value` volts
          * gain                                 clipping fault: an overload / mis-set gain of `value` times
          + floor noise                          the input's own noise, interface_noise_v RMS, always there
    clipped at +/- sensor.input_range_v          the converter's full scale
    runs of exact zeros                          dropouts fault: `value` of the time lost in 2-20 ms runs

A disconnected cable therefore reads the floor noise alone (about 20 uV RMS by default), a clipping
period reads many samples at exactly the input range. A bias step is a DC change at the sensor's
output: through an AC-coupled input (``tau_s > 0``, the first-order coupling of the chain) the input
shows it only as the coupling's step response, ``value x exp(-(t - t_step) / tau)``, at the step and
again (negative) when the bias returns at the fault's end; a DC-coupled input (``tau_s = 0``) shows a
lasting shift of the mean. The sensor's bias removal when a cable is pulled (a large transient of its
own on a real IEPE input) is not modelled.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rotorwatch.settings.models import Sensor

from .randomness import generator, stream_key, white_noise

DROPOUT_MIN_S = 0.002
DROPOUT_MAX_S = 0.020


@dataclass(frozen=True)
class FaultSpan:
    """A sensor fault active over [start_s, end_s)."""

    start_s: float
    end_s: float
    fault: str  # disconnected | clipping | dropouts | bias_step
    value: float


def _span_slice(span: FaultSpan, n0: int, n: int, fs_hz: float) -> slice | None:
    a = max(0, math.ceil(span.start_s * fs_hz) - n0)
    b = n if math.isinf(span.end_s) else min(n, math.ceil(span.end_s * fs_hz) - n0)
    return slice(a, b) if b > a else None


class SensorChain:
    """The volts one point's input records, given its acceleration on the absolute sample grid."""

    def __init__(self, sensor: Sensor, faults: list[FaultSpan], floor_v: float, seed: int, name: str,
                 tau_s: float = 0.0):
        self.sensor = sensor
        self.tau_s = tau_s
        self.faults = sorted(faults, key=lambda f: f.start_s)
        self.floor_v = floor_v
        self.seed = seed
        self.name = name
        self._floor_key = stream_key("floor", name)

    def volts(self, accel_m_s2: np.ndarray, n0: int, fs_hz: float) -> np.ndarray:
        """Volts for samples ``n0 .. n0 + len(accel) - 1`` at ``fs_hz`` (sample i is at (n0 + i) / fs_hz s)."""
        n = len(accel_m_s2)
        v = accel_m_s2 * self.sensor.volts_per_m_s2
        active = [(f, s) for f in self.faults if (s := _span_slice(f, n0, n, fs_hz)) is not None]
        for f, s in active:
            if f.fault == "disconnected":
                v[s] = 0.0
        if self.tau_s > 0:
            for f in self.faults:
                if f.fault == "bias_step":
                    v += self._bias_transient(f, n0, n, fs_hz)
        else:
            for f, s in active:
                if f.fault == "bias_step":
                    v[s] += f.value
        for f, s in active:
            if f.fault == "clipping":
                v[s] *= f.value
        if self.floor_v > 0:
            v += self.floor_v * white_noise(self.seed, self._floor_key, n0, n)
        np.clip(v, -self.sensor.input_range_v, self.sensor.input_range_v, out=v)
        for f, _ in active:
            if f.fault == "dropouts":
                for a, b in self._dropout_runs(f, n0, n, fs_hz):
                    v[a:b] = 0.0
        return v

    def _bias_transient(self, span: FaultSpan, n0: int, n: int, fs_hz: float) -> np.ndarray:
        """The AC-coupled input's view of a bias step: the coupling's step response at the step, and its
        negative when the bias returns at the span's end (exact: the closed-form response of the
        first-order high-pass to a step)."""
        out = np.zeros(n)
        t = (n0 + np.arange(n)) / fs_hz
        for edge_s, size in ((span.start_s, span.value), (span.end_s, -span.value)):
            if not math.isfinite(edge_s):
                continue
            since = t - edge_s
            live = (since >= 0) & (since < 60.0 * self.tau_s)  # beyond 60 tau it is below 1e-26 of the step
            if np.any(live):
                out[live] += size * np.exp(-since[live] / self.tau_s)
        return out

    def _dropout_runs(self, span: FaultSpan, n0: int, n: int, fs_hz: float):
        """Sample ranges (relative to n0) of the dropout runs touching the grid, drawn per second."""
        t0, t1 = n0 / fs_hz, (n0 + n) / fs_hz
        rate_per_s = span.value / (0.5 * (DROPOUT_MIN_S + DROPOUT_MAX_S))
        key = stream_key("dropouts", self.name, repr(span.start_s))
        for sec in range(math.floor(t0) - 1, math.floor(t1) + 1):
            rng = generator(self.seed, key, sec)
            count = rng.poisson(rate_per_s)
            starts = sec + rng.uniform(0.0, 1.0, count)
            lengths = rng.uniform(DROPOUT_MIN_S, DROPOUT_MAX_S, count)
            for st, ln in zip(starts, lengths):
                if not span.start_s <= st < span.end_s:
                    continue
                a = max(0, math.ceil(st * fs_hz) - n0)
                b = min(n, math.ceil((st + ln) * fs_hz) - n0)
                if b > a:
                    yield a, b
