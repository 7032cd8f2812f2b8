"""comparo: cross-taxa compilations of muscle mechanics.

Validated tables with provenance, harmonisation, derived time scales with
uncertainty, scaling fits with honest confidence intervals, and the audit of
which sources each conclusion rests on.

Heavy modules are imported lazily, so ``import comparo`` and ``comparo --help``
stay fast; the public names below resolve on first use. No module shares its
name with a public function: ``comparo.fit`` is the function of
:mod:`comparo.fitting`, ``comparo.derive`` that of :mod:`comparo.derivation`,
``comparo.assess_sensitivity`` that of :mod:`comparo.fitting.source_sensitivity` (the module
map is docs/architecture.md). The naming rule (functions are verbs, their first argument is
what they work on; results are nouns with ``summary()``, ``to_dict()``, ``to_frame()``) and
the old names still accepted are in docs/api.md.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

from comparo.base.version import __version__

# public name -> module that defines it (the naming rule of the API: docs/api.md)
_API = {
    "load": "comparo.validation.dataset",
    "Dataset": "comparo.validation.dataset",
    "check": "comparo.pipeline",
    "ComparoError": "comparo.base.errors",
    "InputError": "comparo.base.errors",
    "UsageError": "comparo.base.errors",
    "Result": "comparo.base.results",
    "ResultLike": "comparo.base.results",
    "Catalog": "comparo.base.catalog",
    "load_catalog": "comparo.base.catalog",
    "audit": "comparo.pipeline",
    "derive": "comparo.derivation",
    "fit": "comparo.fitting",
    "FitResult": "comparo.fitting",
    "compare": "comparo.fitting",
    "build_report": "comparo.pipeline",
    "read_tree": "comparo.phylo",
    "cycles": "comparo.curation.harmonise",
    "impute": "comparo.phylo.imputation",
    "Imputation": "comparo.phylo.imputation",
    "diff": "comparo.history.versions",
    "VersionDiff": "comparo.history.versions",
    "merge": "comparo.history.merging",
    "MergeResult": "comparo.history.merging",
}

# public name -> (module, name there): the verbs of the naming rule for functions first
# published under another name
_NAMED = {
    "tabulate": ("comparo.curation.aggregation", "per_taxon"),
    "fit_multiple": ("comparo.fitting", "multiple_fit"),
    "assess_sensitivity": ("comparo.fitting.source_sensitivity", "sensitivity"),
    "contrast": ("comparo.phylo", "contrasts"),
    "measure_signal": ("comparo.phylo", "tree_signal"),
}

# old public name -> new one: still works, with a DeprecationWarning when called
_RENAMED = {
    "per_taxon": "tabulate",
    "multiple_fit": "fit_multiple",
    "sensitivity": "assess_sensitivity",
    "contrasts": "contrast",
    "tree_signal": "measure_signal",
    "phylo_fit": "fit",  # fit(..., method="pgls"); the function itself warns
}

__all__ = sorted([*_API, *_NAMED, *_RENAMED]) + ["__version__"]


def _renamed(old: str, new: str) -> Any:
    """*new*, called under its old name *old* with a :class:`DeprecationWarning`."""
    import functools
    import warnings

    target = __getattr__(new)

    @functools.wraps(target)
    def call(*args: Any, **kwargs: Any) -> Any:
        warnings.warn(
            f"comparo.{old} is renamed comparo.{new}; the old name will be removed",
            DeprecationWarning,
            stacklevel=2,
        )
        return target(*args, **kwargs)

    call.__name__ = old
    return call


def __getattr__(name: str) -> Any:
    if name == "phylo_fit":
        return import_module("comparo.fitting").phylo_fit
    if name in _RENAMED:
        return _renamed(name, _RENAMED[name])
    if name in _NAMED:
        module, there = _NAMED[name]
        return getattr(import_module(module), there)
    try:
        module = _API[name]
    except KeyError:
        raise AttributeError(f"module 'comparo' has no attribute {name!r}") from None
    return getattr(import_module(module), name)


def __dir__() -> list[str]:
    return __all__
