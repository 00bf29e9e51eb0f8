"""Lazy re-export of a package's public names (PEP 562 module ``__getattr__``).

Each package ``__init__`` lists its public names in ``_EXPORTS`` (name ->
defining submodule) and calls :func:`lazy_exports`; a name's submodule is
imported on first access, so ``import echoreo.scoring`` stays cheap and a
command that needs no plotting never imports matplotlib.
"""

from __future__ import annotations

import importlib
import sys
from collections.abc import Callable
from typing import Any

__all__ = ["lazy_exports"]


def lazy_exports(package: str, exports: dict[str, str]
                 ) -> tuple[Callable[[str], Any], Callable[[], list[str]]]:
    """Module-level ``__getattr__`` and ``__dir__`` for ``package``.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    exports : dict of str to str
        Public name -> submodule of ``package`` that defines it.
    """

    def __getattr__(name: str) -> Any:
        try:
            module = exports[name]
        except KeyError:
            raise AttributeError(f"module {package!r} has no attribute {name!r}") from None
        value = getattr(importlib.import_module(f"{package}.{module}"), name)
        setattr(sys.modules[package], name, value)  # later lookups skip __getattr__
        return value

    def __dir__() -> list[str]:
        return sorted(set(vars(sys.modules[package])) | set(exports))

    return __getattr__, __dir__
