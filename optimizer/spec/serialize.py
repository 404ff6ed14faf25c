"""Specs as JSON-ready dictionaries (SI units, explicit key names)."""

from __future__ import annotations

import dataclasses
from pathlib import Path

from .specfile import Spec

__all__ = ["spec_to_json"]


def _plain(x):
    if dataclasses.is_dataclass(x):
        return {f.name: _plain(getattr(x, f.name)) for f in dataclasses.fields(x)}
    if isinstance(x, (list, tuple)):
        return [_plain(v) for v in x]
    if isinstance(x, Path):
        return str(x)
    return x


def spec_to_json(spec: Spec) -> dict:
    """Every field of the spec, SI units (temperatures in kelvin, levels in V peak)."""
    return _plain(spec)
