"""The building blocks every settings model shares: strict frozen models and constrained field types."""

from __future__ import annotations

from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field

Ident = Annotated[str, Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")]
PositiveFloat = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegFloat = Annotated[float, Field(ge=0, allow_inf_nan=False)]


class Model(BaseModel):
    """Strict (unknown keys are errors) and frozen; validation does no I/O."""

    model_config = ConfigDict(extra="forbid", frozen=True)
