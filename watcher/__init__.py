"""ionwarden: watch an instrument's export folder and judge the health of every MS run."""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from collections.abc import Callable

__version__ = "0.1.0"


def entry_point_getattr(package: str, entry_points: dict[str, str]) -> Callable[[str], Any]:
    """A module ``__getattr__`` (PEP 562) that imports a package's entry points on first use.

    ``entry_points`` maps each public name to the module that defines it; importing one small
    module of a stage package then does not pay for the heavy ones (numpy, lxml, apprise).
    """

    def __getattr__(name: str) -> Any:
        if name in entry_points:
            return getattr(importlib.import_module(entry_points[name]), name)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    return __getattr__
