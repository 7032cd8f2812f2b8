"""comparo: cross-taxa compilations of muscle mechanics.

Validated tables with provenance, harmonisation, derived time scales with
uncertainty, scaling fits with honest confidence intervals, and the audit of
which sources each conclusion rests on.

Heavy modules are imported lazily, so ``import comparo`` and ``comparo --help``
stay fast; the public names below resolve on first use.
"""

from __future__ import annotations

import sys
import types
from importlib import import_module
from typing import Any

__version__ = "0.1.0"

# public name -> module that defines it
_API = {
    "load": "comparo.dataset",
    "Dataset": "comparo.dataset",
    "check": "comparo.dataset",
    "InputError": "comparo.errors",
    "Catalog": "comparo.catalog",
    "load_catalog": "comparo.catalog",
    "per_taxon": "comparo.curate",
    "audit": "comparo.provenance",
    "derive": "comparo.derive",
    "fit": "comparo.fit",
    "sensitivity": "comparo.sensitivity",
    "build_report": "comparo.report",
    "pgls_fit": "comparo.phylo",
    "pic": "comparo.phylo",
    "tree_signal": "comparo.phylo",
    "read_tree": "comparo.phylo",
    "cycles": "comparo.traces",
}

__all__ = sorted(_API) + ["__version__"]


def __getattr__(name: str) -> Any:
    try:
        module = _API[name]
    except KeyError:
        raise AttributeError(f"module 'comparo' has no attribute {name!r}") from None
    return getattr(import_module(module), name)


def __dir__() -> list[str]:
    return __all__


# ``fit``, ``derive`` and ``sensitivity`` are both public functions and the
# submodules that define them. Importing a submodule makes Python bind the
# module object on the package, which would turn ``comparo.fit(...)`` into
# "'module' object is not callable". The package keeps the function instead;
# the submodule itself stays reachable as ``sys.modules["comparo.fit"]`` and
# through ``from comparo.fit import ...``.
_SHADOWED = frozenset(name for name, module in _API.items() if module == f"{__name__}.{name}")


class _Package(types.ModuleType):
    def __setattr__(self, name: str, value: Any) -> None:
        if name in _SHADOWED and isinstance(value, types.ModuleType):
            value = getattr(value, name)
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
