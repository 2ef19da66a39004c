"""Shaft speed over time and its integral, the shaft angle.

    f_r(t)     = rpm(t) / 60 + (rpm_nominal / 60) * drift(t)          shaft frequency, Hz
    turns(t)   = int_0^t f_r                                           shaft revolutions since start
    drift(t)   = sum_j a_j sin(2 pi t / T_j + psi_j)                   slow wander, a fraction of nominal

``rpm(t)`` is the scenario's speed timeline (a :class:`~rotorwatch.simulators.profile.Profile`, the
configured speed unless a ``speed_rpm`` change moves it). The drift is three slow sines (periods of
about 40 minutes, 4 hours and a day, seeded) whose amplitudes add up to ``speed_drift_pct``: the
speed stays within +/- that fraction of nominal. Both parts integrate in closed form, so the angle at
day 29 needs no stepping through days 0..28 and every component that follows the shaft (orders, blade
pass, defect impacts) keeps its phase across snapshots and stream chunks.
"""

from __future__ import annotations

import math

import numpy as np

from .profile import Profile
from .randomness import generator, stream_key

_DRIFT_PERIODS_S = (2400.0, 14800.0, 83000.0)
_DRIFT_WEIGHTS = (0.5, 0.3, 0.2)
_TABLE_STEP_S = 60.0
_NEWTON_STEPS = 4


class SpeedModel:
    """Shaft frequency and angle of one machine; all methods accept scalars or arrays of seconds."""

    def __init__(self, rpm: Profile, nominal_rpm: float, drift_pct: float, seed: int, horizon_s: float = 0.0):
        self.rpm_profile = rpm
        self.nominal_hz = nominal_rpm / 60.0
        rng = generator(seed, stream_key("speed-drift"))
        periods = np.array(_DRIFT_PERIODS_S) * rng.uniform(0.8, 1.25, 3)
        self._omega = 2.0 * math.pi / periods
        self._amp = np.array(_DRIFT_WEIGHTS) * drift_pct / 100.0
        self._psi = rng.uniform(0.0, 2.0 * math.pi, 3)
        if rpm.peak_value <= 0 or min(rpm.value(0.0), rpm.final_value) <= 0:
            raise ValueError("shaft speed must stay above 0 rpm")
        # coarse table of the angle, for a guess of time_at_turns that depends only on the target
        self._table_t = np.arange(0.0, max(horizon_s, 0.0) + 2 * _TABLE_STEP_S, _TABLE_STEP_S)
        self._table_turns = self.turns(self._table_t)
        self._end_hz = float(self.shaft_hz(self._table_t[-1]))
        self._start_hz = float(self.shaft_hz(0.0))

    def drift(self, t_s):
        t = np.asarray(t_s, dtype=float)
        if not self._amp.any():
            return np.zeros_like(t)
        return sum(a * np.sin(w * t + p) for a, w, p in zip(self._amp, self._omega, self._psi))

    def shaft_hz(self, t_s):
        """Instantaneous shaft frequency in Hz."""
        return self.rpm_profile.value(t_s) / 60.0 + self.nominal_hz * self.drift(t_s)

    def rpm(self, t_s):
        return 60.0 * self.shaft_hz(t_s)

    def turns(self, t_s):
        """Shaft revolutions from t = 0 to ``t_s`` (exact integral of :meth:`shaft_hz`)."""
        t = np.asarray(t_s, dtype=float)
        if not self._amp.any():
            return self.rpm_profile.integral(t) / 60.0
        drift_int = sum(a / w * (math.cos(p) - np.cos(w * t + p)) for a, w, p in zip(self._amp, self._omega, self._psi))
        return self.rpm_profile.integral(t) / 60.0 + self.nominal_hz * drift_int

    def turns_and_hz(self, t_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`turns` and :meth:`shaft_hz` of one array of times, the drift's phases computed once
        (the same values, bit for bit, as the two calls)."""
        t = np.asarray(t_s, dtype=float)
        if not self._amp.any():
            return self.turns(t), self.shaft_hz(t)
        drift = drift_int = 0
        for a, w, p in zip(self._amp, self._omega, self._psi):
            arg = w * t + p
            drift = drift + a * np.sin(arg)
            np.cos(arg, out=arg)
            drift_int = drift_int + a / w * (math.cos(p) - arg)
        hz = self.rpm_profile.value(t) / 60.0 + self.nominal_hz * drift
        turns = self.rpm_profile.integral(t) / 60.0 + self.nominal_hz * drift_int
        return turns, hz

    def time_at_turns(self, turns):
        """Times at which the shaft has made ``turns`` revolutions (Newton's method on :meth:`turns`).

        The first guess interpolates a one-minute table of the angle (extrapolated at constant speed
        outside it), then a fixed number of Newton steps follows. The result depends on the target
        alone, never on which other targets are solved with it, so an impact lands on the same instant
        whichever chunk of a stream renders it.
        """
        target = np.asarray(turns, dtype=float)
        tt, tn = self._table_t, self._table_turns
        t = np.interp(target, tn, tt)
        t = np.where(target > tn[-1], tt[-1] + (target - tn[-1]) / self._end_hz, t)
        t = np.where(target < tn[0], (target - tn[0]) / self._start_hz, t)
        for _ in range(_NEWTON_STEPS):
            t = t - (self.turns(t) - target) / self.shaft_hz(t)
        return t
