"""Analysis of results tables: summaries, regression verdicts and difficulty ranking.

The public functions take and return pandas DataFrames. They load on first use (PEP 562 module
`__getattr__`), so the CLI can register its subcommands without importing pandas and scipy.
Three functions share their module's name (summary, compare, rank); the package keeps the
function under that name even after the module is imported (see `_Package`).
"""

from __future__ import annotations

import importlib
import sys
import types

_HOMES = {"summary": "summary", "compare": "compare", "compare_variants": "compare",
          "gate_exit_code": "compare", "rank": "rank", "Ranking": "rank", "fit_rasch": "rank",
          "synthetic_results": "synthetic"}

__all__ = sorted(_HOMES)


def __getattr__(name):
    if name not in _HOMES:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{_HOMES[name]}", __name__), name)
    globals()[name] = value
    return value


class _Package(types.ModuleType):
    def __setattr__(self, name, value):
        # Importing the submodule `summary` binds it on the package; the API function keeps the name.
        if name in _HOMES and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
