"""Lazy public names for the subpackages (PEP 562), so that ``surfinspect --version`` and
``surfinspect check`` do not pay for importing OpenCV, SciPy and reportlab up front.

A room names its modules once; the names it publishes are those modules' own ``__all__``, read
from their source without importing them (the ``__all__ = [...]`` statement only, parsed with
:mod:`ast`), on the first attribute lookup or ``dir()``, and kept for the rest of the process.
"""

from __future__ import annotations

import importlib
import importlib.util
import re
import sys
from typing import Callable, Mapping

_ALL_STATEMENT = re.compile(r"^__all__\s*(?::[^=\n]*)?=(?!=)", re.MULTILINE)


def module_all(module: str) -> tuple[str, ...]:
    """The ``__all__`` of ``module`` (a full dotted name): the module's own if it is imported, else
    :func:`read_all`."""
    loaded = sys.modules.get(module)
    if loaded is not None and hasattr(loaded, "__all__"):
        return tuple(loaded.__all__)
    return read_all(module)


def read_all(module: str) -> tuple[str, ...]:
    """The ``__all__`` that ``module`` (a full dotted name) states, read from its source without running it.

    Raises
    ------
    ImportError
        The module is not found, states no ``__all__`` at its top level, or states it as other than
        a literal list or tuple of strings.
    """
    import ast  # here: 2 ms at start-up otherwise, and only a lookup in a room needs it

    spec = importlib.util.find_spec(module)
    source = spec.loader.get_source(module) if spec is not None and spec.loader is not None else None
    if source is None:
        raise ImportError(f"no source for {module!r} to read its __all__ from")
    found = _ALL_STATEMENT.search(source)
    if found is None:
        raise ImportError(f"{module} states no __all__ at its top level")
    statement = ""
    for line in source[found.start() :].splitlines(keepends=True):  # until the statement is whole
        statement += line
        try:
            value = ast.parse(statement).body[0].value
        except SyntaxError:
            continue
        try:
            names = ast.literal_eval(value)
        except ValueError:
            break
        if isinstance(names, (list, tuple)) and all(isinstance(n, str) for n in names):
            return tuple(names)
        break
    raise ImportError(f"{module}: __all__ is not a literal list or tuple of strings")


def attach(
    package: str,
    modules: tuple[str, ...],
    *,
    aliases: Mapping[str, tuple[str, str]] | None = None,
    own: tuple[str, ...] = (),
) -> tuple[Callable, Callable]:
    """Return ``__getattr__`` and ``__dir__`` for a package; ``__getattr__`` also answers ``__all__``.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    modules : tuple of str
        Submodules (relative to the package) whose ``__all__`` the package publishes, whole. A name
        two of them list is taken from the first. A submodule itself is also reachable as an
        attribute, and is what a name of its own (``archive.verify``) gives: the import system sets
        it on the package when the submodule is imported, so it would be after the first lookup.
    aliases : mapping of str to (str, str), optional
        Public name to (submodule, name inside it): a name published under another name, or one
        taken alone from a module the package does not publish whole.
    own : tuple of str, optional
        Names the package's ``__init__`` defines itself, published beside the others.
    """
    aliases = dict(aliases or {})
    submodules = {m for m in (*modules, *(m for m, _ in aliases.values())) if "." not in m}
    table: dict[str, tuple[str, str]] = {}

    def where() -> dict[str, tuple[str, str]]:
        if not table:
            found: dict[str, tuple[str, str]] = {}
            for module in modules:
                for name in module_all(f"{package}.{module}"):
                    found.setdefault(name, (module, name))
            table.update(found, **aliases)
        return table

    def __getattr__(name: str):
        if name == "__all__":
            return [*own, *sorted(where())]
        if name.startswith("_"):  # never published (a dunder probe, ``from . import _safe_yaml``): nothing read
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        if name in submodules:  # first, and without reading any __all__ (``from .. import recipe``)
            return importlib.import_module(f"{package}.{name}")
        if name in where():
            module, inner = table[name]
            return getattr(importlib.import_module(f"{package}.{module}"), inner)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__() -> list[str]:
        return sorted(set(where()) | submodules | set(own))

    return __getattr__, __dir__


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
