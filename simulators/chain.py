"""The measurement chain: what happens to the housing's vibration on its way to the recorded volts.

A real installation does not record the housing's acceleration as it is. Between the two sit

1. the **mounted accelerometer**: a spring-mass system on the housing whose output follows the base
   acceleration with a second-order response ``H_m(s) = w_m^2 / (s^2 + 2 zeta_m w_m s + w_m^2)``, flat at
   low frequency and rising to a peak at the mounted resonance ``mount_resonance_hz`` (how high depends on
   the mounting: a stud or adhesive mount keeps it high, a magnet or a probe tip lowers it; ISO 5348
   covers mounting and its effect on the frequency response, confirmed in the shared references; the
   response form is the textbook base-excited single-degree-of-freedom system, common practice);
2. the **AC coupling** of the input (the IEPE supply's coupling capacitor, a sound interface's input):
   a first-order high-pass ``H_ac(s) = s / (s + w_c)`` at ``ac_coupling_hz``. It removes the sensor's
   DC bias, so a change of that bias shows only as a transient that decays with ``tau = 1 / w_c``
   (see :mod:`rotorwatch.simulators.sensor`);
3. the **anti-alias filter** of the converter: a low-pass that rolls the response off towards the
   Nyquist frequency, modelled as a digital Butterworth low-pass of ``anti_alias_order`` with its corner
   at ``anti_alias_fraction`` of the sample rate (converters differ; the shape is our own stand-in).

The housing's broadband machine noise is **coloured**, not flat to Nyquist: flat in acceleration from
``noise_low_hz`` to ``noise_high_hz`` with first-order skirts on both sides (our own choice of shape:
broadband flow and friction excitation filtered by the structure; no single source).

The responses come from :mod:`scipy.signal` (``freqs`` for the analog parts, ``butter`` and
``freqz_sos`` for the converter's digital filter). The simulator applies them in ways that keep every
sample a pure function of the scenario and its absolute time, so snapshots can be taken in any order
and a stream cut into chunks equals one long render:

- tones (shaft orders, blade pass, 2xLF) are multiplied by the chain's complex response at their
  frequency, evaluated per absolute block of :data:`GAIN_BLOCK` samples (the steady-state response; the
  speed changes slowly against the chain's time constants);
- bearing impacts ring the housing resonance, a band far narrower than any feature of the chain; they
  are scaled by the chain's gain at that resonance (a narrow-band approximation);
- the noise is synthesised in the frequency domain: independent Gaussian segments of
  ``2 x NOISE_HOP`` samples, each shaped by colour x chain (circularly), joined by sine/cosine
  cross-fades whose squares sum to one (a stationary result with the shaped spectrum);
- a bias step through the AC coupling is its closed-form step response (``sensor.py``).

The simulator may import :mod:`scipy.signal`; the daemon's analysis path does not.
"""

from __future__ import annotations

import math
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy import signal

from .randomness import generator

GAIN_BLOCK = 4096  # samples per block over which a tone's chain response is held (absolute blocks)
NOISE_HOP = 16384  # noise segments of 2 x NOISE_HOP samples, one starting every NOISE_HOP samples
_CACHE_SEGMENTS = 48


@dataclass(frozen=True)
class ChainSettings:
    """The chain of one point, in physical units (0 turns a stage off)."""

    mount_resonance_hz: float = 0.0
    mount_damping_ratio: float = 0.03
    ac_coupling_hz: float = 0.0
    anti_alias_fraction: float = 0.0
    anti_alias_order: int = 8
    noise_low_hz: float = 0.0  # noise colour: first-order high-pass here (0: none) ...
    noise_high_hz: float = 0.0  # ... and first-order low-pass here (0: none)

    @property
    def tau_s(self) -> float:
        """Time constant of the AC coupling (0 for a DC-coupled input)."""
        return 1.0 / (2.0 * math.pi * self.ac_coupling_hz) if self.ac_coupling_hz > 0 else 0.0


class ChainResponse:
    """The chain's complex response at any frequency, for one sample rate."""

    def __init__(self, settings: ChainSettings, fs_hz: float):
        self.settings = settings
        self.fs_hz = fs_hz
        c = settings
        self._sos = None
        if c.anti_alias_fraction > 0:
            self._sos = signal.butter(c.anti_alias_order, c.anti_alias_fraction * fs_hz, btype="lowpass",
                                      fs=fs_hz, output="sos")

    def __call__(self, f_hz) -> np.ndarray:
        """Complex response of sensor, AC coupling and anti-alias filter at ``f_hz`` (array)."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        h = np.ones(f.shape, dtype=complex)
        c = self.settings
        w = 2.0 * math.pi * f
        if c.mount_resonance_hz > 0:
            wm = 2.0 * math.pi * c.mount_resonance_hz
            h *= signal.freqs([wm * wm], [1.0, 2.0 * c.mount_damping_ratio * wm, wm * wm], worN=w)[1]
        if c.ac_coupling_hz > 0:
            h *= signal.freqs([1.0, 0.0], [1.0, 2.0 * math.pi * c.ac_coupling_hz], worN=w)[1]
        if self._sos is not None:
            h *= signal.freqz_sos(self._sos, worN=f, fs=self.fs_hz)[1]
        return h

    def colour(self, f_hz) -> np.ndarray:
        """The machine noise's colour at ``f_hz`` (complex, unnormalised)."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        w = 2.0 * math.pi * f
        g = np.ones(f.shape, dtype=complex)
        c = self.settings
        if c.noise_low_hz > 0:
            g *= signal.freqs([1.0, 0.0], [1.0, 2.0 * math.pi * c.noise_low_hz], worN=w)[1]
        if c.noise_high_hz > 0:
            wh = 2.0 * math.pi * c.noise_high_hz
            g *= signal.freqs([wh], [1.0, wh], worN=w)[1]
        return g


class ShapedNoise:
    """Unit-RMS coloured noise of one stream, addressed by absolute sample index, optionally through
    the chain (then its RMS is whatever the chain leaves of it)."""

    def __init__(self, seed: int, key: int, settings: ChainSettings):
        self.seed = seed
        self.key = key
        self.settings = settings
        self._shapes: dict[tuple[float, bool], np.ndarray] = {}
        self._segments: OrderedDict = OrderedDict()
        t = np.arange(NOISE_HOP) / NOISE_HOP
        self._fade_in = np.sin(0.5 * math.pi * t)  # weight of the segment starting at this block
        self._fade_out = np.cos(0.5 * math.pi * t)  # weight of the segment that started a block earlier

    def _shape(self, fs_hz: float, through_chain: bool) -> np.ndarray:
        key = (fs_hz, through_chain)
        if key not in self._shapes:
            n = 2 * NOISE_HOP
            f = np.fft.rfftfreq(n, 1.0 / fs_hz)
            resp = ChainResponse(self.settings, fs_hz)
            g = resp.colour(f)
            power = np.abs(g) ** 2
            # variance of irfft(rfft(white) * g) for unit white noise: the two-sided mean of |g|^2
            var = (power[0] + power[-1] + 2.0 * power[1:-1].sum()) / n
            g = g / math.sqrt(var) if var > 0 else g
            if through_chain:
                g = g * resp(f)
            self._shapes[key] = g
        return self._shapes[key]

    def _segment(self, k: int, fs_hz: float, through_chain: bool) -> np.ndarray:
        key = (k, fs_hz, through_chain)
        seg = self._segments.get(key)
        if seg is None:
            white = generator(self.seed, self.key, k).standard_normal(2 * NOISE_HOP)
            seg = np.fft.irfft(np.fft.rfft(white) * self._shape(fs_hz, through_chain), n=2 * NOISE_HOP)
            seg.flags.writeable = False
            self._segments[key] = seg
            if len(self._segments) > _CACHE_SEGMENTS:
                self._segments.popitem(last=False)
        else:
            self._segments.move_to_end(key)
        return seg

    def samples(self, n0: int, n: int, fs_hz: float, through_chain: bool) -> np.ndarray:
        """Samples ``n0 .. n0 + n - 1`` (a fresh array)."""
        out = np.empty(n)
        pos = 0
        while pos < n:
            k, u = divmod(n0 + pos, NOISE_HOP)
            take = min(NOISE_HOP - u, n - pos)
            new = self._segment(k, fs_hz, through_chain)[u:u + take]
            old = self._segment(k - 1, fs_hz, through_chain)[NOISE_HOP + u:NOISE_HOP + u + take]
            out[pos:pos + take] = self._fade_in[u:u + take] * new + self._fade_out[u:u + take] * old
            pos += take
        return out
