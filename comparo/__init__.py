"""comparo: cross-taxa compilations of muscle mechanics.

Validated tables with provenance, harmonisation, derived time scales with
uncertainty, scaling fits with honest confidence intervals, and the audit of
which sources each conclusion rests on.

Heavy modules are imported lazily, so ``import comparo`` and ``comparo --help``
stay fast; the public names below resolve on first use. No module shares its
name with a public function: ``comparo.fit`` is the function of
:mod:`comparo.lines`, ``comparo.derive`` that of :mod:`comparo.derivation`,
``comparo.sensitivity`` that of :mod:`comparo.reliance` (the module map is
docs/architecture.md).
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

__version__ = "0.1.0"

# public name -> module that defines it
_API = {
    "load": "comparo.dataset",
    "Dataset": "comparo.dataset",
    "check": "comparo.dataset",
    "ComparoError": "comparo.errors",
    "InputError": "comparo.errors",
    "UsageError": "comparo.errors",
    "Catalog": "comparo.catalog",
    "load_catalog": "comparo.catalog",
    "per_taxon": "comparo.curate",
    "audit": "comparo.provenance",
    "derive": "comparo.derivation",
    "fit": "comparo.lines",
    "FitResult": "comparo.lines",
    "compare": "comparo.lines",
    "multiple_fit": "comparo.lines",
    "sensitivity": "comparo.reliance",
    "build_report": "comparo.report",
    "phylo_fit": "comparo.phylo",
    "contrasts": "comparo.phylo",
    "tree_signal": "comparo.phylo",
    "read_tree": "comparo.phylo",
    "cycles": "comparo.traces",
    "impute": "comparo.phylo.imputation",
    "Imputation": "comparo.phylo.imputation",
    "diff": "comparo.versions",
    "VersionDiff": "comparo.versions",
    "merge": "comparo.merging",
    "MergeResult": "comparo.merging",
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

