"""Every third-party package imported at module level by priors/ or service/ is a core
dependency of the distribution: a README install (`pip install .`) can import every
module. httpx was only in the test extra, so `service.client` and the example script
failed after the documented install."""

from __future__ import annotations

import ast
import sys
from importlib.metadata import packages_distributions, requires
from pathlib import Path

from packaging.requirements import Requirement

ROOT = Path(__file__).resolve().parents[1]
OURS = {"priors", "service"}


def _top_level_imports(path: Path) -> set[str]:
    """Modules imported at module level (not inside functions: those are optional)."""
    names = set()
    for node in ast.parse(path.read_text()).body:
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
        elif isinstance(node, ast.Try):  # try: import x / except ImportError: fallback
            continue
    return names


def _core_requirements() -> set[str]:
    core = set()
    for text in requires("fanfold") or []:
        req = Requirement(text)
        if req.marker is None or "extra" not in str(req.marker):
            core.add(req.name.lower().replace("_", "-"))
    return core


def test_module_level_imports_are_core_dependencies():
    stdlib = set(sys.stdlib_module_names) | {"__future__"}
    dists = packages_distributions()
    core = _core_requirements()
    missing = {}
    modules = [*sorted((ROOT / "priors").rglob("*.py")), *sorted((ROOT / "service").rglob("*.py"))]
    for path in modules:
        if "migrations" in path.parts:
            continue
        for name in _top_level_imports(path) - stdlib - OURS:
            providers = {d.lower().replace("_", "-") for d in dists.get(name, [name])}
            if not providers & core:
                missing.setdefault(name, []).append(str(path.relative_to(ROOT)))
    assert not missing, f"imported at module level but not a core dependency: {missing}"
