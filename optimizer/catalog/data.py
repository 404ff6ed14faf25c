"""Where the catalog data files are: ``catalog/`` beside the package, or inside a wheel."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["catalog_dir", "catalog_path"]


def catalog_dir() -> Path:
    """The folder of catalog data.

    ``STAGEFIT_CATALOG`` overrides it; otherwise the copy inside an installed wheel
    (``optimizer/_catalog``) or the repository's ``catalog/`` folder.
    """
    env = os.environ.get("STAGEFIT_CATALOG")
    if env:
        return Path(env)
    here = Path(__file__).resolve().parent.parent
    packaged = here / "_catalog"
    if packaged.is_dir():
        return packaged
    return here.parent / "catalog"


def catalog_path(name: str) -> Path:
    """The path of one catalog file, e.g. ``catalog_path("transistors.yaml")``."""
    return catalog_dir() / name
