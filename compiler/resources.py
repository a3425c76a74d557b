"""The one place that finds the data folders shipped with the package.

In a checkout (or an editable install) they are the top-level folders
``factor_tables/``, ``report_templates/`` and ``examples/``; in an installed
wheel they are copied into ``compiler/_data/``.
"""

from __future__ import annotations

from pathlib import Path

from .errors import ResourceMissing

_PACKAGE = Path(__file__).resolve().parent
SHIPPED = ("factor_tables", "report_templates", "examples")


def resource_dir(name: str) -> Path:
    """Absolute path of a shipped data folder (``factor_tables``, ``report_templates``, ``examples``)."""
    if name not in SHIPPED:
        raise ValueError(f"unknown resource {name!r}; expected one of {', '.join(SHIPPED)}")
    for base in (_PACKAGE / "_data", _PACKAGE.parent):
        candidate = base / name
        if candidate.is_dir():
            return candidate
    raise ResourceMissing(f"the shipped folder {name!r} was not found beside the package ({_PACKAGE})")
