"""Signal components of a bearing-housing accelerometer, each physically scaled (SI units).

Shaft orders and blade pass
    Sizes are velocity RMS in mm/s at the housing, the unit vibration severity is written in. A tone of
    velocity RMS V at frequency f has acceleration RMS ``V * 2 pi f`` (ISO 10816-1 Annex A: integration
    and differentiation between quantities). :func:`order_tone` follows the shaft angle, so speed
    drift moves every order with it.

Bearing impacts (:class:`ImpactKernel`, :func:`ring`)
    Each impact of a rolling element on a spall excites a housing resonance (natural frequency f_n,
    damping ratio zeta). The kernel is the second derivative of the resonance's displacement response
    ``x(t) = exp(-zeta w_n t) sin(w_d t) (1 - exp(-t / t_rise))^2``: a decaying oscillation whose rise
    takes a quarter period (a contact of finite duration). Being a second derivative of a response that
    starts and ends at rest, its acceleration has no DC and its velocity returns to zero, so impacts add
    no spurious low-frequency velocity (a plain decaying sine would leave a velocity step per impact).
    The kernel is scaled to a peak of 1, so an impact's size is its peak acceleration in m/s^2.
    :func:`ring` sums kernels at exact (sub-sample) impact times; :func:`ring_slow` is its obvious twin
    for the tests.

The impact-train recipe (fault period with random jitter, each impulse ringing a 2-5 kHz resonance with
zeta about 0.05, amplitude modulation at f_r for inner-race and at FTF for element faults) follows the
simulated signals of Randall & Antoni, MSSP 25(2) 2011 (from memory / common practice).
"""

from __future__ import annotations

import math

import numpy as np


def order_tone(frac_turns: np.ndarray, shaft_hz: np.ndarray | float, order: float, velocity_mm_s,
               phase_rad: float, gain=None) -> np.ndarray:
    """Acceleration (m/s^2) of a tone at ``order`` x shaft speed with velocity RMS ``velocity_mm_s``.

    ``frac_turns`` is the fractional shaft angle in revolutions (turns minus its integer part, which
    keeps the sine's argument small at any absolute time). velocity = sqrt(2) V sin(theta), so
    acceleration = sqrt(2) V (2 pi f) cos(theta) with f = order x shaft_hz. ``gain`` (complex, scalar or
    per sample, or a pair (real part, imaginary part) of per-sample arrays) is a response the tone passes
    through: ``Re(a exp(i theta) gain)``.
    """
    amp_m_s2 = math.sqrt(2.0) * (np.asarray(velocity_mm_s) / 1000.0) * 2.0 * math.pi * order * np.asarray(shaft_hz)
    theta = 2.0 * math.pi * ((order * frac_turns) % 1.0) + phase_rad
    if gain is None:
        return amp_m_s2 * np.cos(theta)
    g_re, g_im = gain if isinstance(gain, tuple) else (np.real(gain), np.imag(gain))
    return amp_m_s2 * (np.cos(theta) * g_re - np.sin(theta) * g_im)


class ShaftPhasor:
    """Fast twin of :func:`order_tone` for integer orders on one grid.

    ``z = exp(i 2 pi frac_turns)`` is computed once; order k is ``z**k``, built by complex
    multiplications from the powers already made (no trigonometric call per tone). Non-integer
    orders fall back to :func:`order_tone`.
    """

    def __init__(self, frac_turns: np.ndarray, shaft_hz: np.ndarray | float):
        self.frac_turns = frac_turns
        self.shaft_hz = shaft_hz
        self._powers: dict[int, np.ndarray] = {1: np.exp(2j * math.pi * frac_turns)}

    def _power(self, k: int) -> np.ndarray:
        if k not in self._powers:
            m = max(j for j in self._powers if j <= k)
            rest = k - m
            self._powers[k] = self._powers[m] * (self._power(rest) if rest else 1.0)
        return self._powers[k]

    def tone(self, order: float, velocity_mm_s, phase_rad: float, gain=None) -> np.ndarray:
        """Like :func:`order_tone`, ``gain`` included. ``gain`` may also be a :class:`BlockGain` (the
        response held over blocks of samples): the products with it are then made once per block."""
        if order != int(order) or order < 1:
            if isinstance(gain, BlockGain):
                gain = gain.per_sample()
            return order_tone(self.frac_turns, self.shaft_hz, order, velocity_mm_s, phase_rad, gain)
        amp_m_s2 = math.sqrt(2.0) * (np.asarray(velocity_mm_s) / 1000.0) * 2.0 * math.pi * order * np.asarray(self.shaft_hz)
        z = self._power(int(order))
        c = complex(math.cos(phase_rad), math.sin(phase_rad))
        if gain is None:
            return amp_m_s2 * (z.real * c.real - z.imag * c.imag)
        if isinstance(gain, BlockGain):
            # Re(z c g) with c g = (c.re g_re - c.im g_im) + i (c.re g_im + c.im g_re), per block; every
            # sample's value is the same product as with per-sample gains, made in the same order
            cg_re = gain.apply(c.real * gain.re - c.imag * gain.im)
            cg_im = gain.apply(c.real * gain.im + c.imag * gain.re)
            out = gain.multiply(z.real, cg_re)
            out -= gain.multiply(z.imag, cg_im)
            out *= amp_m_s2
            return out
        g_re, g_im = gain if isinstance(gain, tuple) else (np.real(gain), np.imag(gain))
        cg_re = c.real * g_re - c.imag * g_im
        cg_im = c.real * g_im + c.imag * g_re
        return amp_m_s2 * (z.real * cg_re - z.imag * cg_im)


class BlockGain:
    """A complex response held constant over runs of samples: ``re[i] + 1j im[i]`` for ``counts[i]``
    samples each. Products with a per-sample array are made by broadcasting over whole blocks when the
    runs are all ``block`` long, else after repeating the values per sample."""

    def __init__(self, re: np.ndarray, im: np.ndarray, counts: np.ndarray, block: int):
        self.re, self.im, self.counts = re, im, counts
        self.n = int(counts.sum())
        self.even = bool(np.all(counts == block))
        self.block = block

    def apply(self, per_block: np.ndarray) -> np.ndarray:
        """Values per block, shaped for :meth:`multiply`."""
        return per_block[:, None] if self.even else np.repeat(per_block, self.counts)

    def multiply(self, x: np.ndarray, applied: np.ndarray) -> np.ndarray:
        """``x * applied`` per sample (a fresh array of ``x``'s length)."""
        if self.even:
            return (x.reshape(-1, self.block) * applied).reshape(-1)
        return x * applied

    def per_sample(self) -> tuple[np.ndarray, np.ndarray]:
        return np.repeat(self.re, self.counts), np.repeat(self.im, self.counts)


class ImpactKernel:
    """Acceleration response of the housing resonance to one impact, peak 1 (see the module doc)."""

    def __init__(self, natural_hz: float, damping_ratio: float, floor_db: float = -80.0):
        if not natural_hz > 0 or not 0 < damping_ratio < 1:
            raise ValueError(f"resonance {natural_hz} Hz, damping ratio {damping_ratio}: need f > 0 and 0 < zeta < 1")
        self.natural_hz = natural_hz
        self.damping_ratio = damping_ratio
        w_n = 2.0 * math.pi * natural_hz
        self._sigma = damping_ratio * w_n
        self._w_d = w_n * math.sqrt(1.0 - damping_ratio ** 2)
        rise_s = 0.25 / natural_hz
        # x = sum_j c_j exp(-s_j t) sin(w_d t), from expanding (1 - exp(-t/rise))^2
        self._c = np.array([1.0, -2.0, 1.0])
        self._s = self._sigma + np.array([0.0, 1.0, 2.0]) / rise_s
        # length: until the envelope exp(-sigma t) falls below floor_db
        self.length_s = math.log(10.0 ** (-floor_db / 20.0)) / self._sigma
        fine = np.linspace(0.0, min(self.length_s, 4.0 / natural_hz), 20001)
        self._scale = 1.0
        self._scale = 1.0 / float(np.max(np.abs(self(fine))))

    def __call__(self, tau_s: np.ndarray) -> np.ndarray:
        """Kernel value at delays ``tau_s`` after the impact (0 for tau < 0 or beyond :attr:`length_s`)."""
        tau = np.asarray(tau_s, dtype=float)
        inside = (tau >= 0) & (tau <= self.length_s)
        t = np.where(inside, tau, 0.0)
        w = self._w_d
        sin_wt, cos_wt = np.sin(w * t), np.cos(w * t)
        acc = np.zeros_like(t)
        for c, s in zip(self._c, self._s):
            # d2/dt2 [exp(-s t) sin(w t)] = exp(-s t) [(s^2 - w^2) sin(w t) - 2 s w cos(w t)]
            acc += c * np.exp(-s * t) * ((s * s - w * w) * sin_wt - 2.0 * s * w * cos_wt)
        return np.where(inside, acc * self._scale, 0.0)

    def n_samples(self, fs_hz: float) -> int:
        return int(math.ceil(self.length_s * fs_hz)) + 1

    def rows(self, tau0_s: np.ndarray, fs_hz: float, amplitudes: np.ndarray | None = None) -> np.ndarray:
        """``amplitudes[k] * kernel(tau0[k] + i / fs)`` for i < n_samples(fs), one row per impact
        (``0 < tau0 <= 1 / fs``), without a trigonometric or exponential call per sample.

        With tau = tau0 + u each term ``exp(-s tau) [P sin(w tau) - Q cos(w tau)]`` (P = s^2 - w^2,
        Q = 2 s w) splits into per-impact constants times the fixed rows ``exp(-s u) cos(w u)`` and
        ``exp(-s u) sin(w u)`` (angle-sum identities), so the whole block is one small matrix product.
        """
        basis, u = self._basis(fs_hz)
        tau0 = np.asarray(tau0_s, dtype=float)
        w = self._w_d
        s0, c0 = np.sin(w * tau0), np.cos(w * tau0)
        gain = self._scale if amplitudes is None else self._scale * np.asarray(amplitudes, dtype=float)
        coef = np.empty((len(tau0), 2 * len(self._s)))
        for j, (c, s) in enumerate(zip(self._c, self._s)):
            p, q = s * s - w * w, 2.0 * s * w
            e = c * gain * np.exp(-s * tau0)
            coef[:, 2 * j] = e * (p * s0 - q * c0)
            coef[:, 2 * j + 1] = e * (p * c0 + q * s0)
        # einsum's plain loop (no BLAS): fast for 6 terms, and each row is summed the same way however
        # many impacts share the call, so a stream's chunks match a long render bit for bit
        out = np.einsum("kj,jn->kn", coef, basis)
        tail = max(0, int(np.searchsorted(u, self.length_s - 1.0 / fs_hz)))  # only the last columns can pass the end
        out[:, tail:][(tau0[:, None] + u[None, tail:]) > self.length_s] = 0.0
        return out

    def _basis(self, fs_hz: float) -> tuple[np.ndarray, np.ndarray]:
        cached = getattr(self, "_basis_cache", None)
        if cached is not None and cached[0] == fs_hz:
            return cached[1], cached[2]
        u = np.arange(self.n_samples(fs_hz)) / fs_hz
        rows = []
        for s in self._s:
            decay = np.exp(-s * u)
            rows += [decay * np.cos(self._w_d * u), decay * np.sin(self._w_d * u)]
        basis = np.array(rows)
        self._basis_cache = (fs_hz, basis, u)
        return basis, u


def ring(kernel: ImpactKernel, times_s: np.ndarray, amplitudes: np.ndarray, n0: int, n: int,
         fs_hz: float) -> np.ndarray:
    """Sum of ``amplitudes[k] * kernel(t - times_s[k])`` on the grid ``t = (n0 + i) / fs_hz``, i < n.

    Impact times are exact (not rounded to samples). Positions are taken in absolute samples
    (``times * fs - n0``), so the same impact gives bit-identical samples in any chunk of a stream.
    The kernel rows of all impacts come from one small matrix product (:meth:`ImpactKernel.rows`) and are
    overlap-added in impact order.
    """
    out = np.zeros(n)
    if len(times_s) == 0 or n == 0:
        return out
    n_k = kernel.n_samples(fs_hz)
    pos = np.asarray(times_s, dtype=float) * fs_hz - n0  # impact positions in samples from n0
    first = np.floor(pos).astype(np.int64) + 1  # first sample at or after the impact (tau > 0)
    keep = (first < n) & (first + n_k > 0)
    if not np.any(keep):
        return out
    pos, first, amp = pos[keep], first[keep], np.asarray(amplitudes, dtype=float)[keep]
    rows = max(1, (1 << 20) // n_k)  # bound the temporary matrices to about a million values
    for a in range(0, len(pos), rows):
        b = a + rows
        vals = kernel.rows((first[a:b] - pos[a:b]) / fs_hz, fs_hz, amp[a:b])
        for f, row in zip(first[a:b], vals):  # overlap-add, clipped to the grid
            lo, hi = max(f, 0), min(f + n_k, n)
            out[lo:hi] += row[lo - f:hi - f]
    return out


def ring_slow(kernel: ImpactKernel, times_s, amplitudes, n0: int, n: int, fs_hz: float) -> np.ndarray:
    """Reference twin of :func:`ring`: one impact at a time over the whole grid."""
    t = (n0 + np.arange(n)) / fs_hz
    out = np.zeros(n)
    for tk, ak in zip(times_s, amplitudes):
        out += ak * kernel(t - tk)
    return out


def load_zone_factor(angle_rad: np.ndarray, depth: float) -> np.ndarray:
    """Impact-size factor of a spall passing a stationary radial load zone, in [1 - depth, 1].

    Load on the elements follows a Stribeck-type distribution, ``q ~ cos(angle)^(10/9)`` across the
    loaded half for ball bearings (Harris, "Rolling Bearing Analysis", load distribution; from memory),
    and ``1 - depth`` of the impact remains outside it (preload, unbalance force).
    """
    return (1.0 - depth) + depth * np.maximum(np.cos(angle_rad), 0.0) ** (10.0 / 9.0)
