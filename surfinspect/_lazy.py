"""Lazy public names for the subpackages (PEP 562), so that ``surfinspect --version`` and
``surfinspect check`` do not pay for importing OpenCV, SciPy and reportlab up front."""

from __future__ import annotations

import importlib
from typing import Callable, Mapping


def attach(
    package: str,
    names_by_module: Mapping[str, tuple[str, ...]],
    *,
    aliases: Mapping[str, tuple[str, str]] | None = None,
) -> tuple[Callable, Callable, list[str]]:
    """Return ``__getattr__``, ``__dir__`` and ``__all__`` for a package.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    names_by_module : mapping of str to tuple of str
        Submodule name (relative to the package) to the public names it provides. A submodule
        itself is also reachable as an attribute.
    aliases : mapping of str to (str, str), optional
        Public name to (submodule, name inside it), for a name published under another name.
    """
    where = {name: (module, name) for module, names in names_by_module.items() for name in names}
    where.update(aliases or {})
    submodules = {module for module in names_by_module if "." not in module}

    def __getattr__(name: str):
        if name in where:
            module, inner = where[name]
            value = getattr(importlib.import_module(f"{package}.{module}"), inner)
        elif name in submodules:
            value = importlib.import_module(f"{package}.{name}")
        else:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        return value

    def __dir__() -> list[str]:
        return sorted(set(where) | submodules)

    return __getattr__, __dir__, sorted(where)


class module:  # noqa: N801 - used like the module it stands for
    """A module imported on first attribute access: ``archive = module("surfinspect.archive.store")``.

    For a command module of the command line, whose heavy imports must wait until the command runs.
    """

    def __init__(self, name: str):
        self._name = name

    def __getattr__(self, attr: str):
        return getattr(importlib.import_module(self._name), attr)

    def __repr__(self) -> str:
        return f"<module {self._name!r}, imported when first used>"
