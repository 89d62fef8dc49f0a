"""Life families and their registry: name -> family. Config and CLI validate family names against it.

Adding a family: one module here with a `LogLocationScaleFamily` subclass (standard functions, names,
closed forms) and one line in `FAMILIES`.
"""

from __future__ import annotations

from warranty_forecast.lifecore.families.base import LogLocationScaleFamily
from warranty_forecast.lifecore.families.loglogistic import LOGLOGISTIC
from warranty_forecast.lifecore.families.lognormal import LOGNORMAL
from warranty_forecast.lifecore.families.weibull import WEIBULL

Family = LogLocationScaleFamily

FAMILIES: dict[str, Family] = {family.name: family for family in (WEIBULL, LOGNORMAL, LOGLOGISTIC)}


def get_family(family: str | Family) -> Family:
    """The registered family of that name (a family object is returned as is); ValueError if unknown."""
    if isinstance(family, LogLocationScaleFamily):
        return family
    try:
        return FAMILIES[family]
    except KeyError:
        raise ValueError(f"unknown life family {family!r}; known: {', '.join(sorted(FAMILIES))}") from None


__all__ = ["FAMILIES", "Family", "LOGLOGISTIC", "LOGNORMAL", "WEIBULL", "get_family"]
