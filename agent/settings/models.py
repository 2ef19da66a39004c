"""Machine configuration: what is monitored, how it is measured and when it alarms.

A configuration file (TOML) describes machines; each machine has measurement points (a sensor on a
bearing housing), a running-speed source, its components (rolling bearings, a fan or impeller blade
count) and the bands whose values are trended and alarmed. All values are written in physical units
with the unit in the key name; conversion to samples happens once, in the analysis plan.

Models are strict (unknown keys are errors) and frozen. Validation does no I/O.
"""

from __future__ import annotations

import math
from typing import Literal

from pydantic import Field, PrivateAttr, field_validator, model_validator
from pydantic_core import PydanticCustomError

from .bands import AnyBand, Band, BandBase, FeatureBand, HzBand, OrderBand, band_from  # noqa: F401 (the band kinds, as models.X)
from .base import Ident, Model, NonNegFloat, PositiveFloat
from .iso_band import overall_band_hz
from .levels import Levels
from .policy import (  # noqa: F401 (alarm policy, finding rules and drives, as models.X)
    BEARING_FINDING_NAMES,
    DEFAULT_FINDING_RULES,
    DIAGNOSIS_FINDING_NAMES,
    FINDING_NAMES,
    AlarmPolicy,
    Drive,
    FindingRule,
    ProjectionSettings,
)
from .service import MetricsSettings, MqttSettings, StatusPageSettings, StorageSettings
from .source_kinds import source_kinds

G_N = 9.80665  # standard gravity, m/s^2 (3rd CGPM 1901; ISO 80000-3)


# --------------------------------------------------------------------------------------------- sensor
class Sensor(Model):
    """An accelerometer wired to one input channel."""

    channel: int = Field(ge=0, le=63, description="input channel index, 0-based")
    sensitivity_mv_per_g: PositiveFloat | None = None
    sensitivity_mv_per_m_s2: PositiveFloat | None = None
    direction: Literal["horizontal", "vertical", "axial", "radial"] = "horizontal"
    # Full scale of the input in volts peak: samples near it read as clipping (sensor health).
    input_range_v: PositiveFloat = 1.0
    # An AC-coupled input rolls off at low frequency; when set, spectra are corrected for a
    # first-order high-pass with this corner frequency.
    ac_coupling_corner_hz: PositiveFloat | None = None

    @model_validator(mode="after")
    def _one_sensitivity(self) -> Sensor:
        given = [v for v in (self.sensitivity_mv_per_g, self.sensitivity_mv_per_m_s2) if v is not None]
        if len(given) != 1:
            raise ValueError(
                "give exactly one of sensitivity_mv_per_g or sensitivity_mv_per_m_s2 "
                f"(got {len(given)})"
            )
        return self

    @property
    def volts_per_m_s2(self) -> float:
        """Sensitivity in V/(m/s^2)."""
        if self.sensitivity_mv_per_m_s2 is not None:
            return self.sensitivity_mv_per_m_s2 / 1000.0
        return self.sensitivity_mv_per_g / 1000.0 / G_N  # type: ignore[operator]


class Point(Model):
    """A measurement point: one sensor at one place on the machine."""

    id: Ident
    name: str = ""
    bearing: Ident | None = Field(None, description="id of the bearing this point sits on")
    sensor: Sensor


# ---------------------------------------------------------------------------------------------- speed
class Speed(Model):
    """Where the running speed comes from.

    - ``fixed``: ``rpm`` is the speed (a direct-drive fan on mains).
    - ``estimated``: searched in the spectrum between ``min_rpm`` and ``max_rpm`` (``rpm`` is the
      nominal value, used for the frequency table and as the fallback).
    - ``tach``: a once-per-revolution pulse on input ``tach_channel``.
    - ``mqtt``: a drive or PLC publishes the speed in rpm on ``mqtt_topic``.
    """

    mode: Literal["fixed", "estimated", "tach", "mqtt"] = "fixed"
    rpm: PositiveFloat | None = None
    min_rpm: PositiveFloat | None = None
    max_rpm: PositiveFloat | None = None
    stopped_below_rpm: NonNegFloat | None = Field(
        None, description="below this speed the machine counts as stopped (default 10 % of nominal)"
    )
    tach_channel: int | None = Field(None, ge=0, le=63)
    pulses_per_rev: int = Field(1, ge=1, le=360)
    tach_threshold_v: float = 0.5
    mqtt_topic: str | None = None
    mqtt_max_age_s: PositiveFloat = 60.0
    # A window whose speed changes more than this (percent of its mean, first to last sample) smears the
    # order lines and the bearing lines: the analysis reports it as unsteady. With a tach the window is
    # resampled to shaft angle instead (order tracking). 2 %: in our tests a BPFO line keeps about 85 % of
    # its strength at 2 %, 70 % at 4 % and half at 8 % (our choice, not a standard's).
    max_change_pct: float = Field(2.0, gt=0, le=50)

    @model_validator(mode="after")
    def _mode_fields(self) -> Speed:
        if self.mode == "fixed" and self.rpm is None:
            raise ValueError("mode 'fixed' needs rpm")
        if self.mode == "estimated":
            if self.min_rpm is None or self.max_rpm is None:
                raise ValueError("mode 'estimated' needs min_rpm and max_rpm")
            if self.min_rpm >= self.max_rpm:
                raise ValueError(f"min_rpm ({self.min_rpm:g}) must be below max_rpm ({self.max_rpm:g})")
            if self.rpm is not None and not self.min_rpm <= self.rpm <= self.max_rpm:
                raise ValueError(f"rpm {self.rpm:g} lies outside min_rpm..max_rpm")
        if self.mode == "tach" and self.tach_channel is None:
            raise ValueError("mode 'tach' needs tach_channel")
        if self.mode == "mqtt" and not self.mqtt_topic:
            raise ValueError("mode 'mqtt' needs mqtt_topic")
        if self.mode in ("tach", "mqtt") and self.rpm is None:
            raise ValueError(f"mode '{self.mode}' needs rpm (the nominal speed, used until a reading arrives)")
        return self

    @property
    def nominal_rpm(self) -> float:
        if self.rpm is not None:
            return self.rpm
        return 0.5 * (self.min_rpm + self.max_rpm)  # type: ignore[operator]

    @property
    def stopped_rpm(self) -> float:
        if self.stopped_below_rpm is not None:
            return self.stopped_below_rpm
        return 0.1 * self.lowest_rpm

    @property
    def lowest_rpm(self) -> float:
        """The lowest running speed the machine is configured for (``min_rpm`` when given)."""
        low = self.min_rpm if self.min_rpm is not None else self.nominal_rpm
        return min(low, self.nominal_rpm)


# ------------------------------------------------------------------------------------------ components
class Bearing(Model):
    """A rolling bearing, by geometry or by its defect-frequency multiples of shaft speed.

    Geometry: ``elements`` rolling elements of diameter ``element_diameter`` on pitch diameter
    ``pitch_diameter`` (in ``diameter_unit``), contact angle ``contact_angle_deg``. Multiples: ``bpfo``,
    ``bpfi``, ``bsf`` and ``ftf`` in orders (as a bearing's data sheet or a dataset gives them).
    """

    id: Ident
    name: str = ""
    elements: int | None = Field(None, ge=3, le=200)
    element_diameter: PositiveFloat | None = None
    pitch_diameter: PositiveFloat | None = None
    diameter_unit: Literal["mm", "in"] = "mm"
    contact_angle_deg: float = Field(0.0, ge=0, lt=90)
    bpfo: PositiveFloat | None = None
    bpfi: PositiveFloat | None = None
    bsf: PositiveFloat | None = None
    ftf: PositiveFloat | None = None

    @model_validator(mode="after")
    def _geometry_or_multiples(self) -> Bearing:
        geometry = (self.elements, self.element_diameter, self.pitch_diameter)
        multiples = (self.bpfo, self.bpfi, self.bsf, self.ftf)
        has_geometry = all(v is not None for v in geometry)
        if any(v is not None for v in geometry) and not has_geometry:
            raise ValueError("geometry needs all of elements, element_diameter and pitch_diameter")
        has_multiples = all(v is not None for v in multiples)
        if any(v is not None for v in multiples) and not has_multiples:
            raise ValueError("defect multiples need all of bpfo, bpfi, bsf and ftf")
        if has_geometry == has_multiples:
            raise ValueError("give either the geometry (elements, diameters) or the four defect multiples")
        if has_geometry and self.element_diameter >= self.pitch_diameter:  # type: ignore[operator]
            raise ValueError(
                f"element_diameter ({self.element_diameter:g}) must be smaller than pitch_diameter "
                f"({self.pitch_diameter:g})"
            )
        return self


# --------------------------------------------------------------------------------------------- analysis
class Overall(Model):
    """Overall (broadband) velocity RMS and its ISO 20816-3 evaluation.

    The band is ``low_hz`` .. ``high_hz``. Without ``low_hz`` the machine chooses it by its lowest running
    speed as ISO 20816-3 does (from memory): 2 Hz for machines running 120-600 r/min, 10 Hz above 600 r/min
    (:func:`rotorwatch.settings.iso_band.overall_band_hz`); ``low_edge_by_speed`` then says so.
    """

    low_hz: PositiveFloat | None = None
    high_hz: PositiveFloat = 1000.0
    levels: Levels = Levels()
    _low_by_speed: bool = PrivateAttr(False)

    @model_validator(mode="after")
    def _edges(self) -> Overall:
        if self.low_hz is not None and self.low_hz >= self.high_hz:
            raise ValueError(f"low_hz ({self.low_hz:g}) must be below high_hz ({self.high_hz:g})")
        return self

    @property
    def low_edge_by_speed(self) -> bool:
        """True when ``low_hz`` was chosen from the machine's speed, not configured."""
        return self._low_by_speed


class Envelope(Model):
    """Envelope (demodulation) analysis for rolling bearings.

    ``band_hz = [low, high]`` fixes the demodulation band around a structural resonance; when absent,
    the band is searched between ``auto_min_hz`` and ``auto_max_hz`` on a kurtogram-like grid of
    candidate bands, picked by ``auto_criterion``: once, on the first update of a point's baseline
    learning, and kept from then on (with the baselines, so band values stay comparable and can be
    trended); ``rotorwatch analyze`` searches its recording.
    """

    band_hz: tuple[PositiveFloat, PositiveFloat] | None = None
    auto_min_hz: PositiveFloat = 500.0
    # Top of the search. Default: 0.45 x the sample rate, where a converter's anti-alias filter starts to
    # roll the signal off (common practice, from memory); a band in the roll-off reads the converter more
    # than the machine. Set it when the sensor chain's usable range ends lower (or higher).
    auto_max_hz: PositiveFloat | None = None
    # How a searched band is picked on the kurtogram-like grid: "kurtosis" takes the band of highest
    # spectral kurtosis (Antoni 2006); "cyclic" the band whose squared envelope holds the strongest
    # periodic lines (infogram-like; SK is still computed and reported). See rotorwatch.analysis.envelope.
    auto_criterion: Literal["cyclic", "kurtosis"] = "cyclic"
    fmax_hz: PositiveFloat | None = Field(None, description="envelope-spectrum span (default: covers the defect harmonics)")
    lines: int = Field(1600, ge=100, le=51200)
    # A searched band is chosen when a point starts learning its baseline and kept with the baselines
    # (re-searched on relearn); every band_review_hours of updates the search runs again and reports
    # when it would choose a clearly better band (0: never).
    band_review_hours: float = Field(6.0, ge=0, le=8760, allow_inf_nan=False)

    @model_validator(mode="after")
    def _band(self) -> Envelope:
        if self.band_hz is not None and self.band_hz[0] >= self.band_hz[1]:
            raise ValueError(f"band_hz = {list(self.band_hz)}: the low edge must be below the high edge")
        if self.auto_max_hz is not None and self.auto_max_hz <= self.auto_min_hz:
            raise ValueError(f"auto_max_hz = {self.auto_max_hz:g}: must be above auto_min_hz ({self.auto_min_hz:g})")
        return self


class Analysis(Model):
    """Spectrum settings: ``lines`` lines up to ``fmax_hz`` (default: sample rate / 2.56), Welch
    averaging with a Hann window and ``overlap_pct`` overlap over each update's block."""

    fmax_hz: PositiveFloat | None = None
    lines: int = Field(3200, ge=100, le=102400)
    overlap_pct: float = Field(50.0, ge=0, lt=95)
    window_s: PositiveFloat = Field(4.0, description="seconds of signal averaged into each update")
    envelope: Envelope = Envelope()


class Machine(Model):
    id: Ident
    name: str = ""
    kind: Literal["fan", "pump", "motor", "compressor", "gearbox", "other"] = "fan"
    iso_group: Literal[1, 2] = Field(2, description="ISO 20816-3 machine group: 1 large, 2 medium")
    support: Literal["rigid", "flexible"] = "rigid"
    speed: Speed
    bearings: list[Bearing] = []
    blades: int | None = Field(None, ge=1, le=200, description="fan or impeller blade count")
    # The electrical supply frequency of the machine's motor: 50 or 60 Hz for a direct-on-line motor
    # on the mains; for a drive-fed motor leave it out, or give the drive's output frequency when it is
    # fixed. Twice this frequency (2xLF) and its harmonics are electrical lines, not mechanical ones.
    line_frequency_hz: float | None = Field(None, ge=10, le=400, allow_inf_nan=False)
    # The motor's pole count (2, 4, 6, ...): with the line frequency it gives the synchronous speed, the
    # slip and the pole-pass frequency (rotor-bar sidebands around the motor's 1x).
    motor_poles: int | None = Field(None, ge=2, le=48)
    drive: Drive | None = None
    points: list[Point] = Field(min_length=1)
    bands: list[Band] = []
    overall: Overall = Overall()
    analysis: Analysis = Analysis()
    alarms: AlarmPolicy = AlarmPolicy()

    @model_validator(mode="after")
    def _references(self) -> Machine:
        problems = []
        bearing_ids = [b.id for b in self.bearings]
        point_ids = [p.id for p in self.points]
        for label, ids in (("bearing", bearing_ids), ("point", point_ids), ("band", [b.name for b in self.bands])):
            dupes = sorted({i for i in ids if ids.count(i) > 1})
            if dupes:
                problems.append(f"{label} ids must be unique, repeated: {', '.join(dupes)}")
        for p in self.points:
            if p.bearing is not None and p.bearing not in bearing_ids:
                problems.append(f"point {p.id!r} names bearing {p.bearing!r}, known: {bearing_ids or 'none'}")
        for b in self.bands:
            problems += b.reference_problems(bearing_ids, self.blades)
            for pid in b.points or []:
                if pid not in point_ids:
                    problems.append(f"band {b.name!r} names point {pid!r}, known: {point_ids}")
        if self.motor_poles is not None and self.motor_poles % 2:
            problems.append(f"motor_poles = {self.motor_poles}: a motor has an even number of poles")
        if self.drive is not None and self.drive.kind == "gear" and self.kind != "gearbox":
            problems.append(f"drive.kind = 'gear' needs kind = 'gearbox' (kind is {self.kind!r})")
        if problems:
            raise ValueError("; ".join(problems))
        if self.overall.low_hz is None:
            low, _ = overall_band_hz(self.speed.lowest_rpm)
            if low >= self.overall.high_hz:
                raise ValueError(f"overall.high_hz ({self.overall.high_hz:g}) must be above the band's low edge "
                                 f"({low:g} Hz, chosen by the machine's speed)")
            overall = self.overall.model_copy(update={"low_hz": low})
            overall._low_by_speed = True
            object.__setattr__(self, "overall", overall)  # frozen model: filled once, at validation
        return self

    def point(self, point_id: str) -> Point:
        for p in self.points:
            if p.id == point_id:
                return p
        raise KeyError(point_id)

    def bearing(self, bearing_id: str) -> Bearing:
        for b in self.bearings:
            if b.id == bearing_id:
                return b
        raise KeyError(bearing_id)

    def bands_for(self, point_id: str) -> list[Band]:
        return [b for b in self.bands if b.points is None or point_id in b.points]


# ------------------------------------------------------------------------------------------ acquisition
class Acquisition(Model):
    """Where samples come from. ``source`` picks the kind:

    - ``soundcard``: a sound interface through PortAudio (``device`` by name or index);
    - ``simulated``: a scenario from the simulator streamed as if it were a device (``scenario``);
    - ``recording``: a WAV file played as a stream (``recording``, ``loop``);
    - ``stdin``: raw interleaved float32 frames on standard input;
    - a kind a plugin registered (:func:`rotorwatch.sources.base.register_source`).
    """

    source: str = "simulated"
    sample_rate_hz: PositiveFloat = 51200.0
    channels: int = Field(2, ge=1, le=64)
    device: str | int | None = None
    block_frames: int = Field(4096, ge=64, le=1048576)
    scenario: str | None = None
    recording: str | None = None
    loop: bool = False
    speedup: PositiveFloat = Field(1.0, description="simulated/recorded input: play this many times faster than real time")
    update_interval_s: PositiveFloat = Field(5.0, description="seconds between analysis updates")

    @field_validator("source")
    @classmethod
    def _known_kind(cls, kind: str) -> str:
        known = source_kinds()
        if kind not in known:
            raise PydanticCustomError("source_kind", "unknown input kind (known: {known})", {"known": ", ".join(known)})
        return kind


class Site(Model):
    name: str = ""
    agent_id: Ident = "rotorwatch"


class Config(Model):
    site: Site = Site()
    acquisition: Acquisition = Acquisition()
    machines: list[Machine] = Field(min_length=1)
    mqtt: MqttSettings | None = None
    metrics: MetricsSettings | None = None
    status_page: StatusPageSettings | None = None
    storage: StorageSettings = StorageSettings()

    @model_validator(mode="after")
    def _channels_and_nyquist(self) -> Config:
        problems = []
        ids = [m.id for m in self.machines]
        dupes = sorted({i for i in ids if ids.count(i) > 1})
        if dupes:
            problems.append(f"machine ids must be unique, repeated: {', '.join(dupes)}")
        used: dict[int, str] = {}
        nyquist = self.acquisition.sample_rate_hz / 2.0
        for i, m in enumerate(self.machines):
            channels = [(p.sensor.channel, f"{m.id}/{p.id}") for p in m.points]
            if m.speed.mode == "tach":
                channels.append((m.speed.tach_channel, f"{m.id} tach"))  # type: ignore[arg-type]
            for ch, who in channels:
                if ch in used:
                    problems.append(f"input channel {ch} is used by both {used[ch]} and {who}")
                used[ch] = who
                if ch >= self.acquisition.channels:
                    problems.append(
                        f"{who} uses input channel {ch} but acquisition.channels = {self.acquisition.channels}"
                    )
            at = f"({nyquist:g} Hz at {self.acquisition.sample_rate_hz:g} Hz sampling)"
            for j, b in enumerate(m.bands):
                if isinstance(b, HzBand) and b.high_hz >= nyquist:
                    problems.append(f"machines[{i}].bands[{j}].high_hz = {b.high_hz:g}: must be below Nyquist {at}")
            if m.overall.high_hz >= nyquist:
                problems.append(f"machines[{i}].overall.high_hz = {m.overall.high_hz:g}: must be below Nyquist {at}")
            env = m.analysis.envelope.band_hz
            if env is not None and env[1] >= nyquist:
                problems.append(
                    f"machines[{i}].analysis.envelope.band_hz = [{env[0]:g}, {env[1]:g}]: the upper edge must be below Nyquist {at}"
                )
            fmax = m.analysis.fmax_hz
            if fmax is not None and fmax > nyquist:
                problems.append(f"machines[{i}].analysis.fmax_hz = {fmax:g}: must not exceed Nyquist {at}")
        if problems:
            raise ValueError("; ".join(problems))
        return self

    def machine(self, machine_id: str) -> Machine:
        for m in self.machines:
            if m.id == machine_id:
                return m
        raise KeyError(machine_id)


def finite(x: float) -> bool:
    return x is not None and math.isfinite(x)
