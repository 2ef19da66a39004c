"""Alarm levels of one value: absolute and baseline-relative rises and drops, hysteresis and delays."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from .base import Model, PositiveFloat


class Levels(Model):
    """Alarm levels of one value (a band or the overall velocity), in the value's unit.

    Rises: absolute levels (``warning``, ``alarm``) and levels relative to the baseline learned on the
    healthy machine (``relative_warning``, ``relative_alarm``) may be combined; the lower effective level
    wins. ``relative_form`` says what a relative level means:

    - ``ratio``: a ratio to the baseline median (above 1), e.g. 2.5 = 2.5 x the baseline;
    - ``sigma``: a number of robust standard deviations above the median;
    - ``zone_share`` (overall velocity only): a percentage of the ISO 20816-3 B/C boundary of the
      machine's group and support added to the baseline median (the standard's operational-limit form,
      25 % for the first level), each level capped: warning at 1.25 x B/C, alarm at 1.25 x C/D.

    Drops (a falling value is a change too): ``drop_warning`` / ``drop_alarm`` are absolute levels the
    value falls to, ``relative_drop_warning`` / ``relative_drop_alarm`` the same relative to the baseline
    in the same form (``ratio``: a fraction of the median, below 1; ``sigma``: robust standard deviations
    below it; ``zone_share``: a percentage of the B/C boundary below it); the higher effective drop level
    wins.

    ``clear_margin_pct`` is the hysteresis on the way back (down for rises, up for drops),
    ``on_delay_updates`` the number of consecutive updates beyond a level before it is raised,
    ``off_delay_updates`` the number of consecutive updates back inside the clear level before it clears,
    ``latching`` keeps an alarm until it is acknowledged.
    """

    warning: PositiveFloat | None = None
    alarm: PositiveFloat | None = None
    relative_form: Literal["ratio", "sigma", "zone_share"] = "ratio"
    relative_warning: PositiveFloat | None = None
    relative_alarm: PositiveFloat | None = None
    drop_warning: PositiveFloat | None = None
    drop_alarm: PositiveFloat | None = None
    relative_drop_warning: PositiveFloat | None = None
    relative_drop_alarm: PositiveFloat | None = None
    clear_margin_pct: float = Field(default=10.0, ge=0, lt=100)
    on_delay_updates: int = Field(default=3, ge=1, le=1000)
    off_delay_updates: int = Field(default=1, ge=1, le=1000)
    latching: bool = False

    @model_validator(mode="after")
    def _ordered(self) -> Levels:
        if self.warning is not None and self.alarm is not None and self.warning >= self.alarm:
            raise ValueError(f"warning ({self.warning:g}) must be below alarm ({self.alarm:g})")
        rw, ra = self.relative_warning, self.relative_alarm
        if rw is not None and ra is not None and rw >= ra:
            raise ValueError(f"relative_warning ({rw:g}) must be below relative_alarm ({ra:g})")
        dw, da = self.drop_warning, self.drop_alarm
        if dw is not None and da is not None and da >= dw:
            raise ValueError(f"drop_alarm ({da:g}) must be below drop_warning ({dw:g}): a drop alarm sits further down")
        lowest_rise = min((v for v in (self.warning, self.alarm) if v is not None), default=None)
        highest_drop = max((v for v in (dw, da) if v is not None), default=None)
        if lowest_rise is not None and highest_drop is not None and highest_drop >= lowest_rise:
            raise ValueError(f"drop levels ({highest_drop:g}) must be below the rise levels ({lowest_rise:g})")
        rdw, rda = self.relative_drop_warning, self.relative_drop_alarm
        form = self.relative_form
        if form == "ratio":
            for name, v in (("relative_warning", rw), ("relative_alarm", ra)):
                if v is not None and v <= 1.0:
                    raise ValueError(f"{name} = {v:g}: a ratio to the baseline must be above 1")
            for name, v in (("relative_drop_warning", rdw), ("relative_drop_alarm", rda)):
                if v is not None and v >= 1.0:
                    raise ValueError(f"{name} = {v:g}: a drop as a ratio to the baseline must be below 1")
            if rdw is not None and rda is not None and rda >= rdw:
                raise ValueError(f"relative_drop_alarm ({rda:g}) must be below relative_drop_warning ({rdw:g}) in ratio form")
        else:
            if rdw is not None and rda is not None and rda <= rdw:
                raise ValueError(
                    f"relative_drop_alarm ({rda:g}) must be above relative_drop_warning ({rdw:g}) in {form} form "
                    "(further below the baseline)"
                )
        if form == "zone_share":
            for name, v in (("relative_warning", rw), ("relative_alarm", ra),
                            ("relative_drop_warning", rdw), ("relative_drop_alarm", rda)):
                if v is not None and v > 100.0:
                    raise ValueError(f"{name} = {v:g}: in zone_share form a level is a percentage of the B/C boundary, 100 at most")
        return self

    @property
    def has_drops(self) -> bool:
        return any(v is not None for v in (self.drop_warning, self.drop_alarm, self.relative_drop_warning,
                                           self.relative_drop_alarm))

    @property
    def has_any(self) -> bool:
        return self.has_drops or any(
            v is not None for v in (self.warning, self.alarm, self.relative_warning, self.relative_alarm)
        )
