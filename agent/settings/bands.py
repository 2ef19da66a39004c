"""Bands whose values are trended and alarmed: three kinds, each placing itself and computing its edges.

A ``[[machines.bands]]`` table is written as it always was; the placement keys it holds say its kind:

- :class:`HzBand` (``low_hz``/``high_hz``): fixed edges in Hz;
- :class:`OrderBand` (``low_order``/``high_order``): edges in orders of the running speed used for each
  update, so the band follows the speed;
- :class:`FeatureBand` (``feature``): centred on a kinematic frequency (``shaft``, ``blade_pass``, or a
  bearing defect ``bpfo``/``bpfi``/``bsf``/``ftf`` of ``bearing``) and its first ``harmonics``, each
  window ``tolerance_pct`` either side of its centre (slip and speed uncertainty).

A table that holds the keys of no kind, or of more than one, is refused in one line. Every kind reads
the spectrum of its ``quantity`` (:mod:`.quantities`) and answers :meth:`BandBase.edges_hz`: the edges in
Hz of each of its windows at a shaft speed, given what the machine's kinematics say a feature's order is
(:class:`Kinematics`, implemented by :class:`rotorwatch.kinematics.MachineKinematics`).

Serialised (``model_dump``), a band keeps the one flat form bands have always had: every placement key
present, ``None`` where it is not this kind's. Stored baselines hash that form (so they stay valid), and
validation takes it back.

Adding a band kind: DEVELOPERS.md, "Adding a band kind".
"""

from __future__ import annotations

from typing import Annotated, Any, ClassVar, Literal, Protocol, cast

from pydantic import (
    Discriminator,
    Field,
    SerializationInfo,
    SerializerFunctionWrapHandler,
    Tag,
    TypeAdapter,
    model_serializer,
    model_validator,
)

from .base import Ident, Model, PositiveFloat
from .levels import Levels
from .quantities import QuantityName

Feature = Literal["shaft", "blade_pass", "bpfo", "bpfi", "bsf", "ftf"]
BEARING_DEFECTS = ("bpfo", "bpfi", "bsf", "ftf")
Edges = list[tuple[float, float]]

#: Every key of the flat form, in its order; the placement keys are the kinds' own.
FLAT_KEYS = ("name", "quantity", "low_hz", "high_hz", "low_order", "high_order", "feature", "bearing",
             "harmonics", "tolerance_pct", "points", "levels")
PLACEMENT_KEYS = ("low_hz", "high_hz", "low_order", "high_order", "feature", "bearing")
#: Error type of a table that names no placement or more than one (printed as a message only).
PLACEMENT_ERROR = "band_placement"
PLACEMENT_MESSAGE = "place the band one way: low_hz/high_hz, low_order/high_order or feature"


class Kinematics(Protocol):
    """What a band needs to know of its machine to place itself."""

    def feature_order(self, feature: str, bearing: str | None) -> float:
        """The order (multiple of shaft speed) a kinematic feature sits at."""
        ...


class BandBase(Model):
    """What every kind of band has: a name, the quantity it reads, the points it is on, its levels.

    ``quantity``: ``acceleration`` (m/s^2 RMS), ``velocity`` (mm/s RMS) or ``envelope`` (m/s^2 RMS of
    the envelope spectrum); levels are in that unit. ``points`` limits the band to those points
    (default: every point of the machine).
    """

    #: the tag of this kind (as ``rotorwatch check`` names it)
    kind: ClassVar[str]
    #: True when the edges move with the running speed (orders, features); False when fixed in Hz
    follows_speed: ClassVar[bool]

    name: Ident
    quantity: QuantityName
    points: list[Ident] | None = Field(default=None, description="limit the band to these points (default: all)")
    levels: Levels = Levels()

    @model_validator(mode="before")
    @classmethod
    def _flat_form(cls, data: Any) -> Any:
        """Take back the flat form: placement keys of other kinds set to None are dropped."""
        if isinstance(data, dict):
            data = {k: v for k, v in data.items()
                    if not (k in PLACEMENT_KEYS and v is None and k not in cls.model_fields)}
        return data

    @model_validator(mode="after")
    def _band_levels(self) -> BandBase:
        if self.levels.relative_form == "zone_share":
            raise ValueError(
                "levels.relative_form = 'zone_share' is for the overall velocity only "
                "(its levels are shares of the ISO 20816-3 B/C boundary); use ratio or sigma on a band"
            )
        return self

    @model_serializer(mode="wrap")
    def _flat_dump(self, handler: SerializerFunctionWrapHandler, info: SerializationInfo) -> dict[str, Any]:
        data = handler(self)
        if not info.exclude_none:
            for key in PLACEMENT_KEYS:
                data.setdefault(key, None)
        return {k: data[k] for k in FLAT_KEYS if k in data}

    def edges_hz(self, shaft_hz: float, kinematics: Kinematics) -> Edges:
        """Edges in Hz of each window of the band at shaft frequency ``shaft_hz``."""
        raise NotImplementedError

    def reference_problems(self, bearing_ids: list[str], blades: int | None) -> list[str]:
        """What the band names that its machine lacks (one sentence each)."""
        return []


class _PlacedBySpan(BandBase):
    """A band with one window given by two edges (in Hz or in orders)."""

    # Accepted and not used: a file may carry them on any band (they always were accepted there).
    harmonics: int = Field(default=3, ge=1, le=10, description="not used by this kind of band")
    tolerance_pct: float = Field(default=3.0, gt=0, le=20, description="not used by this kind of band")

    @model_validator(mode="before")
    @classmethod
    def _both_edges_no_bearing(cls, data: Any) -> Any:
        if isinstance(data, dict):
            if sum(data.get(k) is None for k in cls.span_keys.split("/")) == 1:
                raise ValueError(f"{cls.span_keys}: give both edges")
            if data.get("bearing") is not None:
                raise ValueError("bearing is only used with a bearing-defect feature (bpfo, bpfi, bsf, ftf)")
        return data

    #: the two keys of the edges, as error messages name them
    span_keys: ClassVar[str]

    def _span(self) -> tuple[float, float]:
        raise NotImplementedError

    @model_validator(mode="after")
    def _ordered_edges(self) -> _PlacedBySpan:
        lo, hi = self._span()
        if lo >= hi:
            raise ValueError(f"{self.span_keys} = {lo:g}..{hi:g}: the low edge must be below the high edge")
        return self


class HzBand(_PlacedBySpan):
    """Fixed edges ``low_hz`` .. ``high_hz``."""

    kind: ClassVar[str] = "hz"
    follows_speed: ClassVar[bool] = False
    span_keys: ClassVar[str] = "low_hz/high_hz"

    low_hz: PositiveFloat
    high_hz: PositiveFloat

    def _span(self) -> tuple[float, float]:
        return self.low_hz, self.high_hz

    def edges_hz(self, shaft_hz: float, kinematics: Kinematics) -> Edges:
        return [(self.low_hz, self.high_hz)]


class OrderBand(_PlacedBySpan):
    """Edges ``low_order`` .. ``high_order`` times the shaft speed."""

    kind: ClassVar[str] = "orders"
    follows_speed: ClassVar[bool] = True
    span_keys: ClassVar[str] = "low_order/high_order"

    low_order: PositiveFloat
    high_order: PositiveFloat

    def _span(self) -> tuple[float, float]:
        return self.low_order, self.high_order

    def edges_hz(self, shaft_hz: float, kinematics: Kinematics) -> Edges:
        return [(self.low_order * shaft_hz, self.high_order * shaft_hz)]


class FeatureBand(BandBase):
    """Centred on a kinematic feature and its first ``harmonics``, each window +/- ``tolerance_pct``."""

    kind: ClassVar[str] = "feature"
    follows_speed: ClassVar[bool] = True

    feature: Feature
    bearing: Ident | None = None
    harmonics: int = Field(default=3, ge=1, le=10)
    tolerance_pct: float = Field(default=3.0, gt=0, le=20)

    @model_validator(mode="after")
    def _bearing(self) -> FeatureBand:
        if self.feature in BEARING_DEFECTS and self.bearing is None:
            raise ValueError(f"feature '{self.feature}' needs bearing (the id of one of the machine's bearings)")
        if self.bearing is not None and self.feature not in BEARING_DEFECTS:
            raise ValueError("bearing is only used with a bearing-defect feature (bpfo, bpfi, bsf, ftf)")
        return self

    def edges_hz(self, shaft_hz: float, kinematics: Kinematics) -> Edges:
        centre = kinematics.feature_order(self.feature, self.bearing) * shaft_hz
        tol = self.tolerance_pct / 100.0
        return [(k * centre * (1 - tol), k * centre * (1 + tol)) for k in range(1, self.harmonics + 1)]

    def reference_problems(self, bearing_ids: list[str], blades: int | None) -> list[str]:
        problems = []
        if self.bearing is not None and self.bearing not in bearing_ids:
            problems.append(f"band {self.name!r} names bearing {self.bearing!r}, known: {bearing_ids or 'none'}")
        if self.feature == "blade_pass" and blades is None:
            problems.append(f"band {self.name!r} uses blade_pass but the machine has no blades")
        return problems


#: kind tag -> the keys whose presence marks a table as that kind, and its class
BAND_KINDS: dict[str, tuple[tuple[str, ...], type[BandBase]]] = {
    HzBand.kind: (("low_hz", "high_hz"), HzBand),
    OrderBand.kind: (("low_order", "high_order"), OrderBand),
    FeatureBand.kind: (("feature",), FeatureBand),
}


def band_kind(value: Any) -> str | None:
    """The kind of a band table by the placement keys it holds (None: none or more than one kind)."""
    if isinstance(value, BandBase):
        return value.kind
    if not isinstance(value, dict):
        return None
    kinds = [tag for tag, (keys, _) in BAND_KINDS.items() if any(value.get(k) is not None for k in keys)]
    return kinds[0] if len(kinds) == 1 else None


#: Any kind of band, as a type.
AnyBand = HzBand | OrderBand | FeatureBand

Band = Annotated[
    Annotated[HzBand, Tag(HzBand.kind)] | Annotated[OrderBand, Tag(OrderBand.kind)]
    | Annotated[FeatureBand, Tag(FeatureBand.kind)],
    Discriminator(band_kind, custom_error_type=PLACEMENT_ERROR, custom_error_message=PLACEMENT_MESSAGE),
]

# cast: pydantic 2.6 (the floor) types TypeAdapter() for classes only, not for an Annotated union
_BAND_ADAPTER: TypeAdapter[AnyBand] = TypeAdapter(cast(Any, Band))


def band_from(data: dict[str, Any]) -> AnyBand:
    """A band of the kind its placement keys say (``pydantic.ValidationError`` when it is no band)."""
    return _BAND_ADAPTER.validate_python(data)
