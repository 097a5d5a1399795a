"""The package layout: each folder is one stage, and imports flow one way.

A module may import from its own stage and from earlier stages only. The
order is written once, here (DEVELOPERS.md explains it).
"""

import ast
from pathlib import Path

import pytest

# Earliest first. numerics imports nothing of ours; formats read text into
# its two-part times; every later stage builds on the ones before it.
LAYERS = ("numerics", "formats", "geometry", "model", "predict", "fit", "glitch", "events",
          "profiles", "physics", "outputs", "pipeline", "batch", "cli")

PACKAGE = Path(__file__).resolve().parents[1] / "timingkit"
MAX_MODULE_LINES = 650   # "about 600" (DESIGN.md §2)


def _stage(module: str) -> str | None:
    parts = module.split(".")
    if len(parts) < 2 or parts[0] != "timingkit":
        return None
    return parts[1] if parts[1] in LAYERS else None


def _imported_modules(path: Path) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(), filename=str(path))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module == "timingkit":
                found += [(node.lineno, f"timingkit.{a.name}") for a in node.names]
            else:
                found.append((node.lineno, node.module))
        elif isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names]
    return found


def _modules():
    return sorted(p for p in PACKAGE.rglob("*.py") if "__pycache__" not in p.parts)


def test_every_module_sits_in_a_stage():
    loose = [p.name for p in PACKAGE.glob("*.py") if p.name not in ("__init__.py", "__main__.py")]
    assert loose == [], f"modules outside a stage folder: {loose}"
    folders = sorted(p.name for p in PACKAGE.iterdir()
                     if p.is_dir() and (p / "__init__.py").exists())
    assert set(folders) <= set(LAYERS), f"folders not in LAYERS: {set(folders) - set(LAYERS)}"


def test_imports_flow_one_way():
    problems = []
    for path in _modules():
        rel = path.relative_to(PACKAGE.parent)
        here = _stage(".".join(rel.with_suffix("").parts))
        if here is None:
            continue
        for line, module in _imported_modules(path):
            there = _stage(module)
            if there is not None and LAYERS.index(there) > LAYERS.index(here):
                problems.append(f"{rel}:{line} ({here}) imports {module} ({there})")
    assert problems == [], "imports from a later stage:\n" + "\n".join(problems)


def test_the_check_catches_a_backward_import(tmp_path):
    # The test above must be able to fail: a formats module importing the fitter.
    bad = tmp_path / "bad.py"
    bad.write_text("from timingkit.fit.least_squares import fit\nfrom timingkit import cli\n")
    modules = [m for _, m in _imported_modules(bad)]
    assert [_stage(m) for m in modules] == ["fit", "cli"]
    assert LAYERS.index("fit") > LAYERS.index("formats")


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_modules_stay_small(path):
    lines = len(path.read_text().splitlines())
    assert lines <= MAX_MODULE_LINES, f"{path.name} has {lines} lines"


@pytest.mark.parametrize("folder", [f for f in LAYERS if (PACKAGE / f / "__init__.py").exists()])
def test_folder_exports_resolve(folder):
    # Each folder's __init__ names what it offers; every name must exist.
    import importlib
    package = importlib.import_module(f"timingkit.{folder}")
    assert package.__doc__ and len(package.__doc__) > 40
    for name in getattr(package, "EXPORTS", {}):
        assert getattr(package, name) is not None, f"timingkit.{folder}.{name}"
