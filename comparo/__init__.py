"""comparo: cross-taxa compilations of muscle mechanics.

Validated tables with provenance, harmonisation, derived time scales with
uncertainty, scaling fits with honest confidence intervals, and the audit of
which sources each conclusion rests on.

Heavy modules are imported lazily, so ``import comparo`` and ``comparo --help``
stay fast; the public names below resolve on first use. No module shares its
name with a public function: ``comparo.fit`` is the function of
:mod:`comparo.fitting`, ``comparo.derive`` that of :mod:`comparo.derivation`,
``comparo.sensitivity`` that of :mod:`comparo.fitting.source_sensitivity` (the module map is
docs/architecture.md).
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

from comparo.base.version import __version__

# public name -> module that defines it
_API = {
    "load": "comparo.validation.dataset",
    "Dataset": "comparo.validation.dataset",
    "check": "comparo.pipeline",
    "ComparoError": "comparo.base.errors",
    "InputError": "comparo.base.errors",
    "UsageError": "comparo.base.errors",
    "Catalog": "comparo.base.catalog",
    "load_catalog": "comparo.base.catalog",
    "per_taxon": "comparo.curation.aggregation",
    "audit": "comparo.pipeline",
    "derive": "comparo.derivation",
    "fit": "comparo.fitting",
    "FitResult": "comparo.fitting",
    "compare": "comparo.fitting",
    "multiple_fit": "comparo.fitting",
    "sensitivity": "comparo.fitting.source_sensitivity",
    "build_report": "comparo.pipeline",
    "phylo_fit": "comparo.phylo",
    "contrasts": "comparo.phylo",
    "tree_signal": "comparo.phylo",
    "read_tree": "comparo.phylo",
    "cycles": "comparo.curation.harmonise",
    "impute": "comparo.phylo.imputation",
    "Imputation": "comparo.phylo.imputation",
    "diff": "comparo.history.versions",
    "VersionDiff": "comparo.history.versions",
    "merge": "comparo.history.merging",
    "MergeResult": "comparo.history.merging",
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
