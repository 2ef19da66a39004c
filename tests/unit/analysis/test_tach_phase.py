"""1x and 2x amplitude and phase locked to a tach, against a signal of known phase and against an
independent least-squares fit with scipy (scipy.optimize.least_squares on the same samples)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize

from rotorwatch.analysis.point import PointAnalyzer

from .helpers import machine

FS = 25600.0


def _signal(f0_hz: float, f1_hz: float, v1_mm_s: float, ph1_deg: float, v2_mm_s: float, ph2_deg: float,
            seconds: float = 4.0, seed: int = 0):
    """Acceleration of a shaft speeding up linearly from f0 to f1 with velocity tones v cos(2 pi k theta + ph)
    at 1x and 2x, and the tach's pulse times (theta whole)."""
    n = int(seconds * FS)
    t = np.arange(n) / FS
    theta = f0_hz * t + 0.5 * (f1_hz - f0_hz) / seconds * t * t + 0.3  # turns; a pulse where theta is whole
    f_inst = f0_hz + (f1_hz - f0_hz) * t / seconds
    x = np.random.default_rng(seed).normal(0.0, 0.05, n)
    for k, v, ph in ((1, v1_mm_s, ph1_deg), (2, v2_mm_s, ph2_deg)):
        # velocity sqrt2 V cos(psi) -> acceleration -sqrt2 V (2 pi k f) sin(psi), psi = 2 pi k theta + ph
        psi = 2 * np.pi * k * theta + math.radians(ph)
        x += -math.sqrt(2) * v / 1000.0 * 2 * np.pi * k * f_inst * np.sin(psi)
    whole = np.arange(math.ceil(theta[0]), math.floor(theta[-1]) + 1)
    pulses = np.interp(whole, theta, t)
    return x, pulses, theta


@pytest.mark.parametrize("ph1, ph2", [(30.0, 200.0), (275.0, 90.0)])
def test_phase_of_1x_and_2x_at_the_pulse(ph1, ph2):
    m = machine(rpm=1500.0, mode="tach")
    x, pulses, theta = _signal(24.8, 25.2, 4.0, ph1, 1.5, ph2)
    r = PointAnalyzer(m, m.points[0], FS).analyze(x, tach_pulses_s=pulses)
    (v1, p1), (v2, p2) = r.order_phase["1x"], r.order_phase["2x"]
    assert v1 == pytest.approx(4.0, rel=0.03) and v2 == pytest.approx(1.5, rel=0.03)
    assert abs((p1 - ph1 + 180) % 360 - 180) < 2.0 and abs((p2 - ph2 + 180) % 360 - 180) < 2.0

    # scipy: least-squares fit of a cos(2 pi k theta) + b sin(2 pi k theta) (k = 1, 2) to the velocity,
    # integrated from the acceleration in the frequency domain over the same samples
    n = x.size
    spec = np.fft.rfft(x)
    f = np.fft.rfftfreq(n, 1 / FS)
    with np.errstate(divide="ignore", invalid="ignore"):
        vel = np.fft.irfft(np.where(f > 2.0, spec / (2j * np.pi * f), 0.0), n) * 1000.0  # mm/s
    core = slice(n // 10, n - n // 10)

    def resid(p):
        model = sum(p[2 * i] * np.cos(2 * np.pi * k * theta[core]) + p[2 * i + 1] * np.sin(2 * np.pi * k * theta[core])
                    for i, k in enumerate((1, 2)))
        return model - vel[core]

    a1, b1, a2, b2 = scipy.optimize.least_squares(resid, np.zeros(4)).x
    for (a, b), (v, p) in (((a1, b1), (v1, p1)), ((a2, b2), (v2, p2))):
        assert math.hypot(a, b) / math.sqrt(2) == pytest.approx(v, rel=0.03)
        # a cos + b sin = R cos(psi - atan2(b, a)): phase = -atan2(b, a)
        ref = (-math.degrees(math.atan2(b, a))) % 360
        assert abs((p - ref + 180) % 360 - 180) < 2.0


def test_no_tach_no_phase():
    m = machine(rpm=1500.0)
    x, _, _ = _signal(25.0, 25.0, 4.0, 30.0, 1.5, 200.0)
    assert PointAnalyzer(m, m.points[0], FS).analyze(x).order_phase == {}
