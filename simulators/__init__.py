"""The vibration simulator: what an accelerometer on a bearing housing sees, scenario by scenario.

API overview::

    from .scenario import load_scenario
    from .render import ScenarioRenderer

    renderer = ScenarioRenderer(load_scenario("config/scenarios/demo-outer-race.toml"))
    for t_s in renderer.times():                                   # one snapshot per cadence_s
        volts = renderer.snapshot(t_s, 4.0, 51200.0)               # {point id: volts}, faults applied
        accel = renderer.snapshot_accel(t_s, 4.0, 51200.0)         # {point id: m/s^2}, before the sensor
        rpm = renderer.true_rpm(t_s)
    for t0_s, frames in renderer.stream(51200.0, 4096):            # endless float32 volts, one column
        ...                                                        # per input channel

Modules: :mod:`.scenario` (files, validation), :mod:`.render` (the sum of components),
:mod:`.components` (tones, impact kernel), :mod:`.impacts` (defect impact times), :mod:`.rates`
(the simulator's own bearing kinematics), :mod:`.speed` (speed and shaft angle), :mod:`.profile`
(severity timelines), :mod:`.chain` (mounted sensor, AC coupling, anti-alias filter, coloured noise),
:mod:`.sensor` (volts and sensor faults), :mod:`.randomness` (seeded,
position-addressed random numbers). ``rotorwatch simulate`` writes snapshots to WAV.
"""
