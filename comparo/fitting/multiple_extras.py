"""A multiple regression with what ``comparo fit`` adds beside it on request: the fits within
each group (``by``, key ``by``) and the case bootstrap of every term (``bootstrap``, key
``resampling``), so that the Python API answers as the command line does (docs/api.md)."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from comparo.fitting.multiple import MultipleFit


def multiple_fit(
    table: pd.DataFrame,
    y: str,
    predictors: Sequence[str],
    *,
    factor: str | None = None,
    method: str = "ols",
    log: str = "10",
    ci: float = 0.95,
    tree: Any = None,
    lambda_: Any = "ml",
    tree_labels: Mapping[str, str] | None = None,
    taxon_col: str = "taxon",
    against: Mapping[str, float] | None = None,
    linear: Sequence[str] | None = None,
    by: str | None = None,
    bootstrap: int = 0,
    seed: int = 20240601,
) -> MultipleFit:
    """:func:`comparo.fitting.multiple.multiple_fit` (units: the fitted log scale of y and of
    each logged predictor), plus, when asked, *by* (a column: the model fitted within each
    group, :func:`comparo.fitting.multiple_groups.multiple_by`, ``comparo fit --by``) and
    *bootstrap* resamples of the taxa (OLS and robust,
    :func:`comparo.fitting.multiple_resampling.bootstrap_terms`, ``comparo fit --bootstrap
    N --seed S``). ``by`` and ``factor`` together are refused, as on the command line."""
    import comparo.fitting.multiple as m
    from comparo.base.errors import UsageError

    if by is not None and factor is not None:
        raise UsageError(
            f"by={by!r} and factor={factor!r}: give one. factor fits one set of exponents with a "
            "separate elevation per level; by fits the model in each group"
        )
    if bootstrap and method == "pgls":
        from comparo.fitting.multiple_resampling import PGLS_BOOTSTRAP

        raise UsageError(PGLS_BOOTSTRAP)
    if bootstrap < 0:
        raise UsageError(f"bootstrap must be 0 or a positive number (got {bootstrap})")
    opts = {"tree": tree, "lambda_": lambda_, "tree_labels": tree_labels}
    result = m.multiple_fit(
        table, y, predictors, factor=factor, method=method, log=log, ci=ci, taxon_col=taxon_col,
        against=against, linear=linear, **opts,
    )  # fmt: skip
    extra: dict[str, Any] = {}
    if by is not None:
        from comparo.fitting.multiple_groups import multiple_by

        extra["by"] = multiple_by(
            table, y, list(predictors), by, method=method, log=result.log, ci=ci,
            taxon_col=taxon_col, linear=linear, **opts,
        )  # fmt: skip
    if bootstrap:
        from comparo.fitting.multiple_resampling import bootstrap_terms

        d = m.design(
            table, y, list(predictors), factor=factor, log=result.log, taxon_col=taxon_col,
            tree=tree if method == "pgls" else None, tree_labels=tree_labels,
            linear=m.linear_predictors(list(predictors), linear, y),
        )  # fmt: skip
        extra["resampling"] = {"bootstrap": bootstrap_terms(d, result, bootstrap, seed)}
    return dataclasses.replace(result, **extra) if extra else result
