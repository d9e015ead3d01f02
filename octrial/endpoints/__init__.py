"""Endpoint families: the maths of each likelihood with its priors.

Add an endpoint by writing a module with a :class:`~octrial.endpoints.base.Family`
subclass and registering an instance in :data:`FAMILIES`.
"""

from __future__ import annotations

from typing import Any

from octrial.endpoints.base import Family, LatticeFamily
from octrial.endpoints.binary import BinaryFamily
from octrial.endpoints.count import CountFamily
from octrial.endpoints.normal import NormalFamily
from octrial.endpoints.time_to_event import TimeToEventFamily

FAMILIES: dict[str, Family] = {family.name: family for family in (
    BinaryFamily(), CountFamily(), NormalFamily(), TimeToEventFamily())}
"""Every endpoint family, by its ``endpoint.type`` name."""


def family_for(endpoint: Any) -> Family:
    """The family object for an endpoint settings value (or its type name)."""
    name = endpoint if isinstance(endpoint, str) else endpoint.type
    return FAMILIES[name]


__all__ = ["FAMILIES", "Family", "LatticeFamily", "family_for"]
