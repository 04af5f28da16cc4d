"""Modules imported on first use, so that a command pays only for what it runs.

``scipy.sparse`` and ``scipy.special`` cost about 0.3 s each to import; the cluster and
weights modules need them for their computations but not to be imported (their option
classes and constants are read by every command, e.g. to validate a config).
"""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any

__all__ = ["lazy_module"]


class _LazyModule(ModuleType):
    """Stands in for a module until one of its attributes is read; then imports it once."""

    def __init__(self, name: str) -> None:
        super().__init__(name)

    def __getattr__(self, attr: str) -> Any:
        value = getattr(importlib.import_module(self.__name__), attr)
        setattr(self, attr, value)  # the next read skips __getattr__
        return value


def lazy_module(name: str) -> Any:
    """``name`` (e.g. ``"scipy.sparse"``) imported when an attribute is first read.

    >>> sp = lazy_module("scipy.sparse")
    >>> sp.csr_matrix((2, 2)).shape
    (2, 2)
    """
    return _LazyModule(name)
