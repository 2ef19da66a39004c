"""Scenario files: a machine config, its healthy state and a timeline of changes (TOML).

::

    [scenario]
    name = "outer-race spall on the fan drive end"
    description = "..."
    config = "../demo-fan.toml"     # machine configuration, relative to this file
    machine = "ef3"                 # optional when the configuration has one machine
    duration_days = 30
    cadence_s = 3600                # one analysis snapshot per hour when replayed
    seed = 7
    expect = []                     # expectations, checked by the replay (free text here)

    [healthy]                       # severities at t = 0 (defaults shown)
    unbalance_mm_s = 1.0            # 1x, velocity RMS at the housing
    misalignment_mm_s = 0.3         # 2x
    looseness_mm_s = 0.0            # 3x..8x together
    blade_pass_mm_s = 0.4           # blades x speed (2nd and 3rd harmonics at 1/2 and 1/4 of it)
    noise_m_s2 = 0.3                # broadband machine noise, acceleration RMS (coloured: see [structure])
    twice_line_mm_s = 0.0           # 2xLF: the motor's magnetic pull at twice the line frequency
    truncation_depth = 0.0          # looseness as a bounded motion: the 1x cut at (1 - depth) of its peak
    # unbalance_phase_deg = (random)  1x velocity phase at the tach pulse, 0-360 (all points)
    # misalignment_phase_deg = (random)  the same for the 2x
    speed_drift_pct = 0.2           # slow wander of speed within +/- this fraction of nominal
    # speed_rpm = (the configured speed)

    [structure]                     # how the housing responds (defaults shown)
    resonance_hz = 3500.0           # housing resonance the impacts ring
    damping_ratio = 0.05
    cross_transfer = 0.3            # a bearing defect seen at the machine's other points, times this
    slip_jitter_pct = 1.0           # random jitter of the inter-impact period (std)
    impact_scatter_pct = 10.0       # random scatter of impact sizes (std)
    load_zone_depth = 0.8           # share of an impact that depends on the load zone
    interface_noise_v = 2e-5        # the input's own noise floor, volts RMS
    noise_low_hz = 10.0             # machine noise: flat in acceleration from here (first-order skirt below) ...
    noise_high_hz = 1000.0          # ... to here (first-order roll-off above)
    # line_frequency_hz = (the machine's line_frequency_hz)   the supply, for 2xLF

    [chain]                         # the sensor and the input (defaults shown; 0 turns a stage off)
    mount_resonance_hz = 20000.0    # mounted accelerometer resonance
    mount_damping_ratio = 0.03
    # ac_coupling_hz = (the sensor's ac_coupling_corner_hz, else 0.5)   first-order high-pass; 0: DC-coupled
    anti_alias_fraction = 0.45      # converter low-pass corner, as a fraction of the sample rate
    anti_alias_order = 8

    [[change]]
    start_day = 10
    end_day = 31
    component = "outer_race"        # see COMPONENTS
    bearing = "fan-de"              # bearing components only
    points = ["de-h"]               # optional, see below
    to = 40.0                       # severity reached at end_day
    shape = "linear"                # linear | exponential | step (a step happens at start_day)

    [[change]]
    start_day = 12.5
    end_day = 12.55
    component = "sensor"
    points = ["de-h"]
    fault = "disconnected"          # disconnected | clipping | dropouts | bias_step
    # value = ...                   (clipping: gain, dropouts: fraction of time lost, bias_step: volts)

Units of ``to``: ``outer_race``/``inner_race``/``ball`` peak impact acceleration in m/s^2;
``unbalance``/``misalignment``/``looseness``/``blade_pass`` velocity RMS in mm/s; ``half_orders``,
``belt``, ``flow``, ``gear_mesh``, ``gear_sidebands``, ``pole_pass`` (:mod:`rotorwatch.simulators.faults`)
velocity RMS in mm/s of all their lines together; ``noise`` acceleration
RMS in m/s^2; ``twice_line`` velocity RMS in mm/s at twice the line frequency; ``truncation`` the depth of
the cut into the 1x, 0 to 0.9 of its peak (:mod:`rotorwatch.simulators.faults`); ``speed_rpm`` in r/min.

The measurement chain (``[chain]``) and the noise colour are described in
:mod:`rotorwatch.simulators.chain`: the volts a scenario produces are what a mounted, AC-coupled sensor
behind an anti-alias filter delivers, not the housing's acceleration as it is. ``points`` defaults: a bearing defect shows at full size on the
points that sit on its bearing and at ``cross_transfer`` times its size on the machine's other points;
with ``points`` given it shows at full size there and nowhere else. Other components apply to all points
by default. Sensor faults are active from ``start_day`` to ``end_day``.

Loading goes through :mod:`rotorwatch.settings.loading`, so every problem is one line naming the file
and the field path.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from rotorwatch.errors import ConfigError
from rotorwatch.settings.loading import load_config, read_toml, validate
from rotorwatch.settings.models import Config, Machine

BEARING_COMPONENTS = ("outer_race", "inner_race", "ball")
# the shaft, drive, flow and electrical faults of simulators/faults.py come after the first six
LEVEL_COMPONENTS = ("unbalance", "misalignment", "looseness", "blade_pass", "noise", "twice_line",
                    "half_orders", "belt", "flow", "gear_mesh", "gear_sidebands", "pole_pass", "truncation")
# the unit in a level component's [healthy] key when it is not mm/s
LEVEL_UNITS = {"noise": "m_s2", "truncation": "depth"}
COMPONENTS = (*BEARING_COMPONENTS, *LEVEL_COMPONENTS, "speed_rpm", "sensor")
SENSOR_FAULTS = ("disconnected", "clipping", "dropouts", "bias_step")
# default ``value`` of each sensor fault
FAULT_DEFAULTS = {"disconnected": 0.0, "clipping": 200.0, "dropouts": 0.02, "bias_step": 0.1}
DAY_S = 86400.0

NonNeg = Annotated[float, Field(ge=0, allow_inf_nan=False)]
Positive = Annotated[float, Field(gt=0, allow_inf_nan=False)]
Ident = Annotated[str, Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")]


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Header(_Model):
    name: str = Field(min_length=1)
    description: str = ""
    config: str = Field(min_length=1, description="machine configuration file, relative to the scenario file")
    machine: Ident | None = None
    duration_days: Annotated[float, Field(gt=0, le=3650, allow_inf_nan=False)]
    cadence_s: Annotated[float, Field(gt=0, le=DAY_S * 30, allow_inf_nan=False)] = 3600.0
    seed: int = Field(0, ge=0, lt=2 ** 63)
    expect: list[str] = []


class Healthy(_Model):
    unbalance_mm_s: NonNeg = 1.0
    misalignment_mm_s: NonNeg = 0.3
    looseness_mm_s: NonNeg = 0.0
    blade_pass_mm_s: NonNeg = 0.4
    noise_m_s2: NonNeg = 0.3
    twice_line_mm_s: NonNeg = 0.0
    half_orders_mm_s: NonNeg = 0.0
    belt_mm_s: NonNeg = 0.0
    flow_mm_s: NonNeg = 0.0
    gear_mesh_mm_s: NonNeg = 0.0
    gear_sidebands_mm_s: NonNeg = 0.0
    pole_pass_mm_s: NonNeg = 0.0
    truncation_depth: Annotated[float, Field(ge=0, le=0.9, allow_inf_nan=False)] = 0.0
    unbalance_phase_deg: Annotated[float, Field(ge=0, lt=360, allow_inf_nan=False)] | None = None
    misalignment_phase_deg: Annotated[float, Field(ge=0, lt=360, allow_inf_nan=False)] | None = None
    speed_drift_pct: Annotated[float, Field(ge=0, le=5, allow_inf_nan=False)] = 0.2
    speed_rpm: Positive | None = None


class Structure(_Model):
    resonance_hz: Positive = 3500.0
    damping_ratio: Annotated[float, Field(gt=0, lt=0.5)] = 0.05
    cross_transfer: Annotated[float, Field(ge=0, le=1)] = 0.3
    slip_jitter_pct: Annotated[float, Field(ge=0, le=5)] = 1.0
    impact_scatter_pct: Annotated[float, Field(ge=0, le=50)] = 10.0
    load_zone_depth: Annotated[float, Field(ge=0, le=1)] = 0.8
    interface_noise_v: NonNeg = 2e-5
    noise_low_hz: Positive = 10.0
    noise_high_hz: Positive = 1000.0
    line_frequency_hz: Annotated[float, Field(ge=10, le=400, allow_inf_nan=False)] | None = None

    @model_validator(mode="after")
    def _noise_band(self) -> Structure:
        if self.noise_low_hz >= self.noise_high_hz:
            raise ValueError(f"noise_low_hz ({self.noise_low_hz:g}) must be below noise_high_hz ({self.noise_high_hz:g})")
        return self


class Chain(_Model):
    mount_resonance_hz: NonNeg = 20000.0
    mount_damping_ratio: Annotated[float, Field(gt=0, lt=1)] = 0.03
    ac_coupling_hz: Annotated[float, Field(ge=0, le=100, allow_inf_nan=False)] | None = None
    anti_alias_fraction: Annotated[float, Field(ge=0, lt=0.5)] = 0.45
    anti_alias_order: int = Field(8, ge=1, le=16)

    @model_validator(mode="after")
    def _aa(self) -> Chain:
        if 0 < self.anti_alias_fraction < 0.1:
            raise ValueError(f"anti_alias_fraction = {self.anti_alias_fraction:g}: give 0 (none) or a corner "
                             "between 0.1 and 0.5 of the sample rate")
        return self


class Change(_Model):
    start_day: NonNeg
    end_day: NonNeg | None = None
    component: Literal[COMPONENTS]  # type: ignore[valid-type]
    bearing: Ident | None = None
    points: list[Ident] | None = Field(None, min_length=1)
    to: NonNeg | None = None
    shape: Literal["linear", "exponential", "step"] = "linear"
    fault: Literal[SENSOR_FAULTS] | None = None  # type: ignore[valid-type]
    value: float | None = Field(None, allow_inf_nan=False)

    @model_validator(mode="after")
    def _consistent(self) -> Change:
        c = self.component
        if c in BEARING_COMPONENTS and self.bearing is None:
            raise ValueError(f"component {c!r} needs bearing (the id of one of the machine's bearings)")
        if c not in BEARING_COMPONENTS and self.bearing is not None:
            raise ValueError(f"bearing is only used with {', '.join(BEARING_COMPONENTS)} (component is {c!r})")
        if c == "sensor":
            if self.fault is None:
                raise ValueError(f"component 'sensor' needs fault: one of {', '.join(SENSOR_FAULTS)}")
            if self.to is not None:
                raise ValueError("a sensor fault has no 'to'; use value (clipping: gain, dropouts: fraction, bias_step: volts)")
            if self.end_day is None:
                raise ValueError("a sensor fault needs end_day (when it is repaired)")
            if self.fault == "disconnected" and self.value is not None:
                raise ValueError("fault 'disconnected' takes no value")
            if self.fault == "clipping" and self.value is not None and self.value <= 1:
                raise ValueError(f"value = {self.value:g}: the clipping fault's gain must be above 1")
            if self.fault == "dropouts" and self.value is not None and not 0 < self.value < 1:
                raise ValueError(f"value = {self.value:g}: the share of time lost to dropouts must be in (0, 1)")
        else:
            if self.fault is not None or self.value is not None:
                raise ValueError("fault and value are only used with component 'sensor'")
            if self.to is None:
                raise ValueError(f"component {c!r} needs to (the severity reached at end_day)")
            if c == "truncation" and self.to > 0.9:
                raise ValueError(f"to = {self.to:g}: a truncation's depth is a share of the 1x peak, 0 to 0.9")
            if c == "speed_rpm" and self.to <= 0:
                raise ValueError("to = 0: speed_rpm must stay above 0")
            if self.shape != "step" and self.end_day is None:
                raise ValueError(f"a {self.shape} change needs end_day (a step happens at start_day)")
            if self.shape == "step" and self.end_day is not None:
                raise ValueError("a step change happens at start_day; end_day is not used, remove it")
        if self.end_day is not None and self.end_day <= self.start_day:
            raise ValueError(f"end_day {self.end_day:g} must be after start_day {self.start_day:g}")
        if c == "speed_rpm" and self.points is not None:
            raise ValueError("speed_rpm applies to the whole machine; points is not used")
        return self

    @property
    def fault_value(self) -> float:
        return self.value if self.value is not None else FAULT_DEFAULTS[self.fault]  # type: ignore[index]


class ScenarioFile(_Model):
    scenario: Header
    healthy: Healthy = Healthy()
    structure: Structure = Structure()
    chain: Chain = Chain()
    change: list[Change] = []


@dataclass(frozen=True)
class Scenario:
    """A validated scenario with its machine configuration loaded."""

    path: Path
    spec: ScenarioFile
    config_path: Path
    config: Config
    machine: Machine

    @property
    def name(self) -> str:
        return self.spec.scenario.name

    @property
    def duration_s(self) -> float:
        return self.spec.scenario.duration_days * DAY_S


def load_scenario(path: str | Path) -> Scenario:
    """Read, validate and cross-check a scenario file against its machine configuration.

    Raises :class:`~rotorwatch.errors.ConfigError` with one line per problem.
    """
    path = Path(path)
    source = str(path)
    spec = validate(ScenarioFile, read_toml(path), source)
    head = spec.scenario
    config_path = (path.parent / head.config).resolve()
    if not config_path.is_file():
        raise ConfigError([f"{source}: scenario.config = {head.config!r}: no such file ({config_path})"])
    config = load_config(config_path)
    ids = [m.id for m in config.machines]
    if head.machine is None:
        if len(ids) != 1:
            raise ConfigError([f"{source}: scenario.machine: {config_path.name} has {len(ids)} machines, name one of: {', '.join(ids)}"])
        machine = config.machines[0]
    elif head.machine not in ids:
        raise ConfigError([f"{source}: scenario.machine = {head.machine!r}: not in {config_path.name}, known: {', '.join(ids)}"])
    else:
        machine = config.machine(head.machine)
    problems = cross_check(spec, machine, config, source)
    if problems:
        raise ConfigError(problems)
    return Scenario(path=path, spec=spec, config_path=config_path, config=config, machine=machine)


def affected_points(change: Change, machine: Machine, cross_transfer: float) -> dict[str, float]:
    """Points a change shows at, with the factor it shows with there (see the module doc)."""
    if change.points is not None:
        return {p: 1.0 for p in change.points}
    if change.component in BEARING_COMPONENTS:
        out = {p.id: (1.0 if p.bearing == change.bearing else cross_transfer) for p in machine.points}
        return {p: g for p, g in out.items() if g > 0}
    return {p.id: 1.0 for p in machine.points}


def cross_check(spec: ScenarioFile, machine: Machine, config: Config, source: str) -> list[str]:
    """Problems between a scenario and its machine: unknown ids, overlapping changes, rates."""
    problems: list[str] = []
    bearing_ids = [b.id for b in machine.bearings]
    point_ids = [p.id for p in machine.points]
    duration = spec.scenario.duration_days
    spans: dict[tuple, list[tuple[float, float, int]]] = {}
    for i, ch in enumerate(spec.change):
        where = f"{source}: change[{i}]"
        if ch.bearing is not None and ch.bearing not in bearing_ids:
            problems.append(f"{where}.bearing = {ch.bearing!r}: unknown bearing, known: {', '.join(bearing_ids) or 'none'}")
            continue
        bad = [p for p in ch.points or [] if p not in point_ids]
        if bad:
            problems.append(f"{where}.points = {bad}: unknown point, known: {', '.join(point_ids)}")
            continue
        need = {"belt": (machine.drive is not None and machine.drive.kind == "belt", "a belt drive ([machines.drive] kind = 'belt')"),
                "gear_mesh": (machine.drive is not None and machine.drive.kind == "gear", "a gear drive ([machines.drive] kind = 'gear')"),
                "pole_pass": (bool(machine.line_frequency_hz and machine.motor_poles), "line_frequency_hz and motor_poles")}
        need["gear_sidebands"] = need["gear_mesh"]
        if ch.component in need and not need[ch.component][0]:
            problems.append(f"{where}.component = {ch.component!r}: machine {machine.id!r} needs {need[ch.component][1]}")
        if ch.component == "blade_pass" and not machine.blades:
            problems.append(f"{where}.component = 'blade_pass': machine {machine.id!r} has no blades")
        if ch.start_day >= duration:
            problems.append(f"{where}.start_day = {ch.start_day:g}: after the scenario's end (duration_days = {duration:g})")
        end = ch.end_day if ch.end_day is not None else ch.start_day
        subject = ch.fault if ch.component == "sensor" else ch.bearing
        targets = ["*"] if ch.component == "speed_rpm" else list(affected_points(ch, machine, spec.structure.cross_transfer))
        clash = None
        for p in targets:
            key = (ch.component, subject, p)
            for s0, s1, j in spans.get(key, []):
                if clash is None and (ch.start_day < s1 and s0 < end or ch.start_day == s0):
                    clash = f"{where}: overlaps change[{j}] ({ch.component}{' ' + subject if subject else ''} at {p}, days {s0:g}-{s1:g})"
            spans.setdefault(key, []).append((ch.start_day, end, i))
        if clash:
            problems.append(clash)
    uses_line = spec.healthy.twice_line_mm_s > 0 or any(c.component == "twice_line" for c in spec.change)
    if uses_line and spec.structure.line_frequency_hz is None and machine.line_frequency_hz is None:
        problems.append(
            f"{source}: twice_line needs the line frequency: set line_frequency_hz on machine {machine.id!r} "
            "or structure.line_frequency_hz in the scenario"
        )
    fs = config.acquisition.sample_rate_hz
    if spec.structure.resonance_hz >= 0.45 * fs:
        problems.append(
            f"{source}: structure.resonance_hz = {spec.structure.resonance_hz:g}: must be below 0.45 x the configured "
            f"sample rate ({0.45 * fs:g} Hz at {fs:g} Hz)"
        )
    return problems
