"""The public surface of :mod:`priors` is exactly ``priors.__all__``.

Pattern from encode/httpx ``tests/test_exported_members.py``; submodules bound on the
package by its own imports (``priors.data``...) are not exports.
"""

from __future__ import annotations

import types

import priors
from priors import errors


def _isort_key(name: str) -> tuple[int, str]:
    """CONSTANTS, then Classes, then functions (ruff RUF022's "isort-style" order)."""
    kind = 0 if name.isupper() else 1 if name[:1].isupper() else 2
    return kind, name


def _public_names() -> list[str]:
    return [
        name for name, value in vars(priors).items()
        if not name.startswith("_") and not isinstance(value, types.ModuleType)
    ]


def test_all_equals_the_public_names():
    assert sorted(priors.__all__) == sorted(_public_names())


def test_all_is_sorted():
    assert priors.__all__ == sorted(_public_names(), key=_isort_key)


def test_every_exported_name_resolves():
    assert len(set(priors.__all__)) == len(priors.__all__)
    for name in priors.__all__:
        assert getattr(priors, name) is not None, name


def test_every_error_class_is_exported():
    assert set(errors.__all__) <= set(priors.__all__)
    for name in errors.__all__:
        assert getattr(priors, name) is getattr(errors, name)
