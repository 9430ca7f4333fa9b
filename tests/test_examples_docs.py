"""The shell commands in examples/curl.md work as written: a shell variable inside single
quotes is not expanded, so `'.../models/$ID/...'` asked for a model called "$ID"."""

from __future__ import annotations

import re
from pathlib import Path

CURL = Path(__file__).resolve().parents[1] / "examples" / "curl.md"


def _single_quoted(command: str) -> list[str]:
    """The parts of a shell command inside single quotes (outside double quotes)."""
    parts, quote, current = [], None, []
    for char in command:
        if quote is None and char in "'\"":
            quote, current = char, []
        elif char == quote:
            if quote == "'":
                parts.append("".join(current))
            quote = None
        elif quote is not None:
            current.append(char)
    return parts


def test_the_scanner_sees_single_quotes():
    assert _single_quoted("curl 'http://h/$ID/x' -d \"$ID\"") == ["http://h/$ID/x"]


def test_no_shell_variable_sits_inside_single_quotes():
    commands = [line for line in CURL.read_text().splitlines() if line.startswith("curl ")]
    assert commands
    bad = [c for c in commands if any(re.search(r"\$[A-Z_]", p) for p in _single_quoted(c))]
    assert not bad, bad
