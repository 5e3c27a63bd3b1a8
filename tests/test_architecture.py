"""The house rules of the package layout, as checks that can fail.

Rooms are stacked floors: a module may import its own room and the rooms below it, never one
above. The shared contracts at the bottom import no room at all, and the measurement core imports
nothing but the standard library, numpy, scipy, OpenCV and scikit-image, plus Pillow and simplejpeg
for strict image checks (no PDF, database or web code). The map of the rooms is at the top of DEVELOPERS.md; keep the two in step.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "surfinspect"

#: Floor of each room, lowest first. ``shared`` is the top-level modules (contracts and utilities).
FLOORS = {"shared": 0, "measure": 1, "qualify": 2, "report": 3, "archive": 4, "station": 5, "review": 6, "cli": 7}

#: What the measurement core may import besides the standard library and its own package.
MEASURE_THIRD_PARTY = {"numpy", "scipy", "cv2", "skimage", "PIL", "simplejpeg"}  # the last two: strict image checks

#: Modules that exist to face the outside (the public API and ``python -m``) may import any room.
FACADES = {"surfinspect/__init__.py", "surfinspect/__main__.py"}


def _modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def _dotted(path: Path) -> list[str]:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return parts[:-1] if parts[-1] == "__init__" else parts


def _room(dotted: list[str]) -> str:
    """``surfinspect.measure.engine`` -> measure; ``surfinspect.recipe`` -> shared."""
    if len(dotted) >= 2 and dotted[1] in FLOORS and (PACKAGE / dotted[1]).is_dir():
        return dotted[1]
    return "shared"


def _imports(path: Path) -> list[tuple[int, str]]:
    """Every import in the file (also inside functions), as absolute dotted names."""
    here = _dotted(path)
    package = here if path.name == "__init__.py" else here[:-1]
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if node.level and not node.module:  # from . import a, b: each name may be a module
                found += [(node.lineno, f"{target}.{alias.name}") for alias in node.names]
            else:
                found.append((node.lineno, target))
    return found


def _is_package_module(name: str) -> bool:
    """Whether ``surfinspect.x.y`` names a module or package (not a name inside one)."""
    rel = Path(*name.split("."))
    return (PACKAGE.parent / rel).with_suffix(".py").exists() or (PACKAGE.parent / rel).is_dir()


def _target_room(name: str) -> str:
    parts = name.split(".")
    while len(parts) > 1 and not _is_package_module(".".join(parts)):
        parts = parts[:-1]
    return _room(parts)


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE.parent)))
def test_no_module_imports_a_room_above_its_own(path):
    rel = str(path.relative_to(PACKAGE.parent))
    if rel in FACADES:
        return
    room = _room(_dotted(path))
    upward = [
        f"{rel}:{line}: imports {name} ({_target_room(name)} is above {room})"
        for line, name in _imports(path)
        if name.split(".")[0] == "surfinspect" and FLOORS[_target_room(name)] > FLOORS[room]
    ]
    assert not upward, "\n".join(upward)


@pytest.mark.parametrize(
    "path", sorted((PACKAGE / "measure").rglob("*.py")), ids=lambda p: str(p.relative_to(PACKAGE.parent))
)
def test_measurement_core_imports_only_numeric_libraries(path):
    rel = str(path.relative_to(PACKAGE.parent))
    foreign = [
        f"{rel}:{line}: imports {name}"
        for line, name in _imports(path)
        if (top := name.split(".")[0]) != "surfinspect"
        and top not in sys.stdlib_module_names
        and top not in MEASURE_THIRD_PARTY
    ]
    banned_stdlib = [
        f"{rel}:{line}: imports {name}" for line, name in _imports(path) if name.split(".")[0] == "sqlite3"
    ]
    assert not foreign + banned_stdlib, "\n".join(foreign + banned_stdlib)


def test_the_checker_sees_an_upward_import(tmp_path, monkeypatch):
    """The rules above must be able to fail: a fake measure module importing the report is caught."""
    fake = PACKAGE / "measure" / "engine.py"
    imports = _imports(fake)
    assert any(name.startswith("surfinspect.recipe") for _, name in imports)  # relative import resolved
    probe = tmp_path / "probe.py"
    probe.write_text("from ..report import pdf\nimport reportlab\n")
    monkeypatch.setattr(sys.modules[__name__], "_dotted", lambda p: ["surfinspect", "measure", "probe"])
    names = [n for _, n in _imports(probe)]
    assert names == ["surfinspect.report", "reportlab"]
    assert FLOORS[_target_room("surfinspect.report")] > FLOORS["measure"]
    assert _target_room("surfinspect.report.pdf.render_report") == "report"
    assert _target_room("surfinspect.results.PartResult") == "shared"


# ------------------------------------------------------------------ sizes

#: House rules: no module over ~600 lines, no function over ~80. A function's length is its lines
#: from ``def`` to its end without its docstring (numpydoc parameters and references are not logic).
MAX_MODULE_LINES = 600
MAX_FUNCTION_LINES = 80

#: Functions allowed to be longer because they are data tables, not logic, as "path::name".
#: None at present; a name added here needs a comment saying what table it holds.
DATA_TABLES: set[str] = set()

#: Being split under issue 12/11; remove when done. Modules ("path") and functions ("path::name")
#: whose owners are reworking them now. An entry that no longer exceeds the limit fails the test
#: below, so the list cannot outlive its reason.
BEING_SPLIT = {
    # issue 11: the measurement engine
    "surfinspect/measure/datum.py",
}


def _function_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    lines = node.end_lineno - node.lineno + 1
    first = node.body[0]
    if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) and isinstance(first.value.value, str):
        lines -= first.end_lineno - first.lineno + 1
    return lines


def _oversized(path: Path, rel: str) -> dict[str, str]:
    """Entry ("path" or "path::name") -> why it is too long, for one module."""
    text = path.read_text(encoding="utf-8")
    found = {}
    n_lines = len(text.splitlines())
    if n_lines > MAX_MODULE_LINES:
        found[rel] = f"{rel}: {n_lines} lines (house rule: at most {MAX_MODULE_LINES})"
    for node in ast.walk(ast.parse(text, rel)):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            n = _function_lines(node)
            if n > MAX_FUNCTION_LINES:
                found[f"{rel}::{node.name}"] = (
                    f"{rel}:{node.lineno}: {node.name} is {n} lines without its docstring "
                    f"(house rule: at most {MAX_FUNCTION_LINES}; split it into named pieces)"
                )
    return found


def _all_oversized() -> dict[str, str]:
    found = {}
    for path in _modules():
        found.update(_oversized(path, str(path.relative_to(PACKAGE.parent))))
    return found


def test_no_module_or_function_is_over_the_size_limits():
    found = _all_oversized()
    too_long = [why for entry, why in sorted(found.items()) if entry not in DATA_TABLES | BEING_SPLIT]
    assert not too_long, "\n".join(too_long)


def test_every_size_exemption_is_still_needed():
    found = _all_oversized()
    stale = sorted((DATA_TABLES | BEING_SPLIT) - set(found))
    assert not stale, "within the limits now, remove from the exemptions: " + ", ".join(stale)


def test_the_size_checker_sees_a_long_module_and_a_long_function(tmp_path):
    """The size rules must be able to fail: a probe module of 700 lines with an 81-line function."""
    body = "\n".join(f"    x{k} = {k}" for k in range(80))
    probe = tmp_path / "probe.py"
    probe.write_text(
        f'def long_one():\n    """A docstring,\n\n    not counted."""\n{body}\n\n\n'
        f'def fits():\n    """Docstring."""\n' + "\n".join(f"    y{k} = {k}" for k in range(79)) + "\n" + "#\n" * 530
    )
    found = _oversized(probe, "surfinspect/probe.py")
    assert set(found) == {"surfinspect/probe.py", "surfinspect/probe.py::long_one"}
    assert "long_one is 81 lines" in found["surfinspect/probe.py::long_one"]


# ------------------------------------------------------------------ public names of the rooms


def _attach_call(init: Path):
    """The modules, aliases and own names a package's ``__init__`` gives ``_lazy.attach``, or None."""
    for node in ast.walk(ast.parse(init.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "attach":
            keywords = {k.arg: ast.literal_eval(k.value) for k in node.keywords}
            return ast.literal_eval(node.args[1]), keywords.get("aliases", {}), keywords.get("own", ())
    return None


LAZY_PACKAGES = sorted(".".join(_dotted(init)) for init in PACKAGE.rglob("__init__.py") if _attach_call(init))


def test_the_rooms_publish_lazily():
    assert {"surfinspect", "surfinspect.measure", "surfinspect.archive", "surfinspect.report"} <= set(LAZY_PACKAGES)


@pytest.mark.parametrize("package_name", LAZY_PACKAGES)
def test_a_lazy_package_publishes_its_modules_names_and_each_resolves(package_name):
    """A package's lazily published ``__all__`` is the union of its modules' own ``__all__`` (as
    imported) with its aliases and own names, and every name resolves to the object its module
    holds; a name two modules list is one object in both; the ``__all__`` read from each module's
    source, without importing it, is the one the imported module has."""
    import importlib

    from surfinspect._lazy import read_all

    modules, aliases, own = _attach_call(PACKAGE.parent.joinpath(*package_name.split("."), "__init__.py"))
    package = importlib.import_module(package_name)
    expected, problems = {}, []
    for module_name in modules:
        module = importlib.import_module(f"{package_name}.{module_name}")
        if read_all(module.__name__) != tuple(module.__all__):
            problems.append(f"{module.__name__}: its __all__ as read from source is not the imported one")
        for name in module.__all__:
            value = getattr(module, name)  # an AttributeError here: a name in __all__ the module lacks
            if expected.setdefault(name, value) is not value:
                problems.append(f"{name} is listed by two modules of {package_name} as different objects")
    for name, (module_name, inner) in aliases.items():
        expected[name] = getattr(importlib.import_module(f"{package_name}.{module_name}"), inner)
    problems += [f"{name}: a published name must not begin with _" for name in expected if name.startswith("_")]
    assert not problems, "\n".join(problems)
    assert package.__all__ == [*own, *sorted(expected)] and all(hasattr(package, name) for name in own)
    assert set(dir(package)) >= set(expected)
    # A name that is also a submodule's (``archive.verify``) is that submodule once it is imported:
    # the import system sets it on the package.
    expected.update({n: sys.modules[f"{package_name}.{n}"] for n in expected if f"{package_name}.{n}" in sys.modules})
    wrong = [name for name, value in expected.items() if getattr(package, name) is not value]
    assert not wrong, f"{package_name} resolves these to other objects than their modules hold: {wrong}"


def test_the_static_read_of_all_refuses_what_it_cannot_read(tmp_path, monkeypatch):
    """A module without ``__all__`` or with a computed one is an error, not an empty or wrong list."""
    from surfinspect._lazy import read_all

    (tmp_path / "lazy_probe_ok.py").write_text('import os\n\n__all__ = [\n    "a",\n    "b",\n]\na = b = 1\n')
    (tmp_path / "lazy_probe_none.py").write_text("a = 1\n")
    (tmp_path / "lazy_probe_sum.py").write_text('__all__ = ["a"] + ["b"]\n')
    monkeypatch.syspath_prepend(str(tmp_path))
    assert read_all("lazy_probe_ok") == ("a", "b")
    assert "lazy_probe_ok" not in sys.modules  # read, not imported
    with pytest.raises(ImportError, match="states no __all__"):
        read_all("lazy_probe_none")
    with pytest.raises(ImportError, match="not a literal list"):
        read_all("lazy_probe_sum")
