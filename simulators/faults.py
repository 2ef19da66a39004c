"""Tones of the shaft, drive, flow and electrical faults the scenarios can grow, as orders of the speed shaft.

Each component is a set of tones (order of the shaft ``machine.speed`` measures, weight) whose weights are
scaled so that the set's root-sum-square is 1: a component's level (mm/s RMS) is the velocity RMS of all
its lines together. The tones follow the shaft angle like the 1x and 2x of :mod:`.render` (a fault's lines
move with the speed). The simulator computes its own kinematics here and does not import
``rotorwatch.analysis`` (DEVELOPERS.md: a mistake in one must not confirm itself through the other).

- ``half_orders`` -- looseness's half orders 0.5x, 1.5x, 2.5x, 3.5x (weights 1, 0.8, 0.6, 0.4);
- ``belt`` -- belt pass x1..x4 (weights 0.6, 1, 0.4, 0.25: the 2nd often highest, common practice); belt
  pass = pi D_driver f_driver / belt length, or ``belt_pass_order`` x driver speed;
- ``flow`` -- broadband sub-synchronous content: 40 tones at random orders between 0.15x and 0.8x of the
  rotor (the driven shaft with a drive), random weights, the 0.5x neighbourhood left out;
- ``gear_mesh`` -- mesh x1..x3 (weights 1, 0.4, 0.2), mesh = driver teeth x driver speed;
- ``gear_sidebands`` -- mesh -/+ 1x and -/+ 2x of the driven shaft (weights 1, 1, 0.5, 0.5): a worn or
  eccentric driven gear modulating the mesh;
- ``pole_pass`` -- the motor's 1x -/+ the pole-pass frequency (weights 1, 0.8), pole pass = poles x slip
  frequency at the nominal speed (slip = 2 LF / poles - f_motor).

Two more shapes of the shaft's own tones:

- ``truncation`` -- looseness as a bounded motion: the 1x tone is cut on one side at ``1 - depth`` of its
  peak (``depth`` 0 to 0.9), its motion stopped in one direction by a clearance, which puts harmonics 2x, 3x,
  4x ... of the 1x into the signal and takes from the 1x (common practice: looseness shows as a truncated
  waveform with many harmonics). The cut's mean is taken out again (an accelerometer behind AC coupling
  reads none): for ``cos`` cut at ``c``, the mean is ``-(sqrt(1 - c^2) - c acos c) / pi`` and the
  fundamental keeps ``1 - (acos c - c sqrt(1 - c^2)) / pi`` (its Fourier series);
- the 1x and 2x phases (``[healthy] unbalance_phase_deg``, ``misalignment_phase_deg``): the phase of the
  velocity at the tach's pulse (the shaft's whole turns), ``v = sqrt(2) V cos(2 pi k turns + phase)``,
  the same on every point; without them each point's tones keep their seeded random phases.
"""

from __future__ import annotations

import math

import numpy as np

from rotorwatch.settings.models import Machine

from .randomness import generator, stream_key

FAULT_COMPONENTS = ("half_orders", "belt", "flow", "gear_mesh", "gear_sidebands", "pole_pass")
FLOW_TONES = 40


def _norm(pairs: list[tuple[float, float]]) -> list[tuple[float, float]]:
    total = math.sqrt(sum(w * w for _, w in pairs))
    return [(o, w / total) for o, w in pairs] if total > 0 else []


def _speeds(m: Machine) -> tuple[float, float]:
    """(driver, driven) speeds as multiples of the speed shaft's (1, 1 without a drive)."""
    d = m.drive
    if d is None:
        return 1.0, 1.0
    ratio = (d.driver_sheave_mm / d.driven_sheave_mm if d.kind == "belt"  # type: ignore[operator]
             else d.driver_teeth / d.driven_teeth)  # type: ignore[operator]
    return (1.0, ratio) if d.speed_of == "driver" else (1.0 / ratio, 1.0)


def rotor_order(m: Machine) -> float:
    """Speed of the rotor (the driven shaft of a drive) in orders of the speed shaft."""
    return _speeds(m)[1]


def fault_tones(m: Machine, seed: int, point_id: str) -> dict[str, list[tuple[float, float]]]:
    """(order of the speed shaft, weight) of each fault component the machine can carry."""
    driver, driven = _speeds(m)
    rotor = driven
    out: dict[str, list[tuple[float, float]]] = {
        "half_orders": _norm([(k * rotor, w) for k, w in ((0.5, 1.0), (1.5, 0.8), (2.5, 0.6), (3.5, 0.4))]),
    }
    rng = generator(seed, stream_key("flow-orders", point_id))
    orders = rng.uniform(0.15, 0.8, 4 * FLOW_TONES)
    orders = orders[np.abs(orders - 0.5) > 0.04][:FLOW_TONES]
    out["flow"] = _norm([(float(o) * rotor, float(w)) for o, w in zip(orders, rng.uniform(0.5, 1.0, orders.size))])
    d = m.drive
    if d is not None and d.kind == "belt":
        bp = (d.belt_pass_order if d.belt_pass_order is not None
              else math.pi * d.driver_sheave_mm / d.belt_length_mm) * driver  # type: ignore[operator]
        out["belt"] = _norm([(h * bp, w) for h, w in ((1, 0.6), (2, 1.0), (3, 0.4), (4, 0.25))])
    if d is not None and d.kind == "gear":
        mesh = d.driver_teeth * driver  # type: ignore[operator]
        out["gear_mesh"] = _norm([(h * mesh, w) for h, w in ((1, 1.0), (2, 0.4), (3, 0.2))])
        out["gear_sidebands"] = _norm([(mesh + k * driven, w) for k, w in ((-1, 1.0), (1, 1.0), (-2, 0.5), (2, 0.5))])
    if m.line_frequency_hz and m.motor_poles:
        motor_hz = m.speed.nominal_rpm / 60.0 * driver
        slip_hz = 2.0 * m.line_frequency_hz / m.motor_poles - motor_hz
        if slip_hz > 0:
            f_p = m.motor_poles * slip_hz
            out["pole_pass"] = _norm([(driver * (1 - f_p / motor_hz), 1.0), (driver * (1 + f_p / motor_hz), 0.8)])
    return out


def fixed_phases_rad(unbalance_phase_deg: float | None, misalignment_phase_deg: float | None) -> dict[str, float]:
    """Tone phase (the renderer's convention: acceleration ``cos(2 pi k turns + p)``, so velocity
    ``sin(...)``) of the 1x and 2x whose velocity phase at the pulse is given (module docstring):
    ``cos(x + phase) = sin(x + phase + pi/2)``, so ``p = phase + pi/2``."""
    out = {}
    for component, deg in (("unbalance", unbalance_phase_deg), ("misalignment", misalignment_phase_deg)):
        if deg is not None:
            out[component] = math.radians(deg) + math.pi / 2.0
    return out


def truncate(x_m_s2: np.ndarray, depth, velocity_mm_s, order: float, shaft_hz) -> np.ndarray:
    """The tone ``x_m_s2`` (velocity RMS ``velocity_mm_s`` at ``order`` x ``shaft_hz``) cut on its positive
    side at ``1 - depth`` of its peak, its mean removed (scalars or per-sample arrays); unchanged where
    ``depth`` is 0."""
    peak_m_s2 = math.sqrt(2.0) * (np.asarray(velocity_mm_s) / 1000.0) * 2.0 * math.pi * order * np.asarray(shaft_hz)
    c = 1.0 - np.asarray(depth)
    mean = -(np.sqrt(1.0 - c * c) - c * np.arccos(c)) / math.pi * peak_m_s2
    return np.minimum(x_m_s2, c * peak_m_s2) - mean
