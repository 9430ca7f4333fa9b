"""No process-wide state changes on a request path.

The service answers requests in several threads at once. A pandas option or a warning
filter is process-wide: set in one thread, it is undone by another (a frequency inference
wrapped in ``pd.option_context`` failed 2 times in 19,613 requests under load with
"'str' object has no attribute 'freqstr'"). So the engine and the service's request-path
modules must not set them; only the command-line modules (one thread) may.

A static scan: any call of the functions below in those modules fails this test.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
#: process-wide setters (numpy's errstate is context-local and so allowed)
FORBIDDEN = {
    ("warnings", "catch_warnings"), ("warnings", "simplefilter"),
    ("warnings", "filterwarnings"), ("warnings", "resetwarnings"),
    ("pd", "option_context"), ("pd", "set_option"), ("pd", "reset_option"),
    ("np", "seterr"), ("np", "set_printoptions"), ("os", "putenv"),
}
#: one-thread entry points: the command line and its optional benchmark
COMMAND_LINE = {"service/cli/commands.py", "service/cli/planning.py", "service/compute/ets.py"}


def _modules() -> list[Path]:
    files = sorted((ROOT / "priors").rglob("*.py")) + sorted((ROOT / "service").rglob("*.py"))
    return [f for f in files if str(f.relative_to(ROOT)) not in COMMAND_LINE]


def _calls(source: str) -> list[str]:
    """``line name`` of every forbidden call in ``source``."""
    found = []
    for node in ast.walk(ast.parse(source)):
        if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                and isinstance(node.func.value, ast.Name)
                and (node.func.value.id, node.func.attr) in FORBIDDEN):
            found.append(f"line {node.lineno} {node.func.value.id}.{node.func.attr}")
    return found


def test_the_scan_sees_the_modules():
    names = {str(p.relative_to(ROOT)) for p in _modules()}
    assert {"priors/calendar.py", "priors/autoconfig.py", "service/serialization.py",
            "service/compute/engine.py"} <= names
    assert not names & COMMAND_LINE


def test_the_scan_finds_a_forbidden_call():
    source = ("import pandas as pd\nimport warnings\n"
              "with pd.option_context('a', 1):\n    pass\n"
              "with warnings.catch_warnings():\n    pass\n")
    assert _calls(source) == ["line 3 pd.option_context", "line 5 warnings.catch_warnings"]


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(ROOT)))
def test_no_process_wide_setting_on_a_request_path(path):
    assert _calls(path.read_text()) == []
