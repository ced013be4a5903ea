"""Declaration of a fitted parameter, shared by model components
(:mod:`edgefit.models`) and size-distribution families
(:mod:`edgefit.dust.sizes`), which sit in different layers."""
from __future__ import annotations

import math
from dataclasses import dataclass

from astropy import units as u

from .errors import ModelError

__all__ = ["Param"]


@dataclass(frozen=True)
class Param:
    """Declaration of one component parameter.

    ``unit`` is the unit the number is expressed in (an astropy unit
    string, e.g. ``"1e22 cm-2"``, ``"keV"``, ``"um"``; empty for
    dimensionless).  ``vary`` is whether the parameter is free by default.
    """

    name: str
    default: float
    min: float = -math.inf
    max: float = math.inf
    unit: str = ""
    description: str = ""
    vary: bool = True

    def convert(self, value, component: str = "") -> float:
        """A number in this parameter's unit from a number or Quantity."""
        if isinstance(value, u.Quantity):
            unit = u.Unit(self.unit) if self.unit else u.dimensionless_unscaled
            try:
                return float(value.to_value(unit, equivalencies=u.spectral()))
            except u.UnitConversionError as exc:
                raise ModelError(f"{component}.{self.name}: cannot convert {value.unit} "
                                 f"to {self.unit or 'dimensionless'}") from exc
        return float(value)
