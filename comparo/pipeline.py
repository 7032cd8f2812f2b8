"""The pipeline: the stages of comparo run one after the other, data flowing one way.

    read -> validate -> reduce traces -> harmonise -> per-taxon -> (derive, fit, report)

Each stage is a function of its room that takes what it needs as arguments and returns
its result (docs/architecture.md):

* read + validate: :func:`comparo.validation.tables.check` (a folder -> CheckResult with
  its Dataset);
* reduce traces: :func:`comparo.traces.files.read_traces` (Dataset -> TraceSet, with the
  problems of traces.csv and its files);
* harmonise: :func:`comparo.curation.harmonise.harmonise` (Dataset, TraceSet -> Harmonised
  rows, the rows computed from the traces joined);
* per-taxon: :func:`comparo.curation.aggregation.per_taxon` (Dataset, Harmonised -> table);
* the check against relatives: :func:`comparo.phylo.outliers.phylo_outliers` (Dataset,
  table or Harmonised -> PhyloCheck);
* derive: :func:`comparo.derivation.derive` (table, settings -> derived table).

:class:`Run` holds one dataset and memoises each stage explicitly (a stage runs at most
once per run, only when asked for). :func:`check` is the one gate, behind both
``comparo.check`` and ``comparo check``: it composes the problems of every stage, each
room checking its own part (:func:`gate_problems`). :func:`audit` composes the
provenance audit with the check against relatives on the tree, and :func:`build_report`
hands :func:`check` to the report as its gate. This module may import every room but the
command line; no room imports it.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problems_frame, problems_from_frame

__all__ = ["Run", "audit", "build_report", "check", "gate_problems"]


class Run:
    """The stages of one loaded dataset, each computed once and only when asked for.

    Parameters
    ----------
    ds : comparo.Dataset
        A loaded (validated) dataset.
    temperature : bool
        Bring temperature-sensitive values to the reference temperature (harmonise).
    harmonised : Harmonised, optional
        The dataset's harmonised rows, when already computed.
    """

    def __init__(self, ds: Any, *, temperature: bool = True, harmonised: Any = None) -> None:
        self.ds = ds
        self.temperature = temperature
        self._traces: Any = None
        self._harmonised: Any = harmonised
        self._table: Any = None

    @property
    def traces(self) -> Any:
        """The dataset's traces reduced (:func:`comparo.traces.files.read_traces`): a
        TraceSet, empty without traces.csv."""
        if self._traces is None:
            from comparo.traces.files import TraceSet, read_traces

            self._traces = read_traces(self.ds) if self.ds.traces is not None else TraceSet()
        return self._traces

    @property
    def harmonised(self) -> Any:
        """The harmonised rows (:func:`comparo.curation.harmonise.harmonise`), the rows
        computed from the traces joined."""
        if self._harmonised is None:
            from comparo.curation.harmonise import harmonise

            traces = self.traces if self.ds.traces is not None else None
            self._harmonised = harmonise(self.ds, temperature=self.temperature, traces=traces)
        return self._harmonised

    @property
    def table(self) -> Any:
        """The per-taxon table (:func:`comparo.curation.aggregation.per_taxon`)."""
        if self._table is None:
            from comparo.curation.aggregation import per_taxon

            self._table = per_taxon(
                self.ds, temperature=self.temperature, harmonised=self.harmonised
            )
        return self._table

    def settings_problems(self) -> list[Problem]:
        """Every problem of ``comparo.toml``'s later settings, each room checking its own:
        the sections' types (validation), ``[derive]`` and ``[ratios]`` (derivation),
        ``[[analysis]]`` and ``[[comparison]]`` (fitting), ``[impute]`` (validation.imputing)."""
        from comparo.derivation import settings as derivation
        from comparo.fitting import declared
        from comparo.validation import settings as validation
        from comparo.validation.imputing import impute_problems

        ds = self.ds
        settings = ds.settings or {}
        probs = validation.settings_problems(settings)
        if not validation.later_checkable(settings, probs):
            return probs
        probs += derivation.settings_problems(settings, ds.catalog)
        columns = set(ds.taxa.columns) if ds.taxa is not None else set()
        probs += declared.settings_problems(settings, ds.catalog, columns)
        return probs + impute_problems(settings, ds.catalog)

    def tree_problems(self) -> list[Problem]:
        """What a tree-based fit would reject or drop (:func:`comparo.phylo.tips.tree_problems`,
        given the accepted names of the compilation)."""
        if self.ds.tree is None:
            return []
        from comparo.curation.harmonise import accepted_names
        from comparo.phylo.tips import tree_problems

        return tree_problems(self.ds, accepted_names(self.ds).dropna().astype(str))

    def trace_problems(self) -> list[Problem]:
        """Every problem of traces.csv and the trace files (the reduction's own)."""
        return list(self.traces.problems) if self.ds.traces is not None else []

    def findings(self) -> list[Problem]:
        """Curation's findings on the harmonised rows
        (:func:`comparo.curation.findings.diagnostics`) and the values far from what their
        relatives on the tree predict (:func:`comparo.phylo.outliers.outlier_problems`)."""
        from comparo.curation.findings import diagnostics, problem_file

        h = self.harmonised
        found = diagnostics(self.ds, h)
        if self.ds.tree is None:
            return found
        from comparo.phylo.outliers import outlier_problems, phylo_outliers

        check = phylo_outliers(self.ds, harmonised=h, temperature=self.temperature)
        return found + outlier_problems(check, h.rows, problem_file(self.ds, h))


def gate_problems(ds: Any, run: Run | None = None) -> list[Problem]:
    """What a later step (derive, fit, report) would reject in *ds*, for ``check`` to find
    first: the settings of each step, the tree's branch lengths and tips, traces.csv and
    its trace files. Every check runs whenever the dataset could be read, so every problem
    comes in one pass."""
    run = run or Run(ds)
    return run.settings_problems() + run.tree_problems() + run.trace_problems()


def check(folder: str | Path) -> Any:
    """Read and validate a dataset folder and return every problem found (errors, warnings
    and notes), as ``comparo check`` prints them: the tables' rules, then
    :func:`gate_problems`, then (when nothing so far is an error) curation's findings and
    the check against relatives on the tree. A
    :class:`~comparo.validation.tables.CheckResult`; never raises for bad cells, raises
    :class:`~comparo.InputError` only when the folder itself is missing."""
    from comparo.curation.findings import TRACE_ROWS_RULE
    from comparo.validation.tables import check as validate_folder

    result = validate_folder(folder)
    if result.dataset is None:
        return result
    run = Run(result.dataset)
    extra = gate_problems(result.dataset, run)
    if result.ok and not any(p.severity == "error" for p in extra):
        extra += run.findings()
    if not extra:
        return result
    traces = sum(int(p.value or 0) for p in extra if p.rule == TRACE_ROWS_RULE)
    result = replace(
        result,
        problems=problems_frame(problems_from_frame(result.problems) + extra),
        rows_from_traces=traces,
    )
    result.dataset.problems = result.problems
    return result


def audit(ds: Any, *, temperature: bool = True, harmonised: Any = None) -> Any:
    """Provenance audit of a loaded dataset (:func:`comparo.curation.provenance.audit`) with
    its ``phylo_*`` keys: the values checked against what their relatives on the tree
    predict (:func:`comparo.phylo.outliers.phylo_outliers`). Load with
    ``comparo.load(folder, strict=False)`` to audit a table that still has errors."""
    from comparo.curation import provenance
    from comparo.phylo.completion import imputation_audit
    from comparo.phylo.outliers import phylo_outliers
    from comparo.validation.dataset import as_dataset

    ds = as_dataset(ds)
    run = Run(ds, temperature=temperature, harmonised=harmonised)
    phylo = phylo_outliers(ds, run.table)
    return provenance.audit(
        ds,
        temperature=temperature,
        harmonised=run.harmonised,
        table=run.table,
        phylo=phylo,
        imputed=imputation_audit(ds),
    )


def build_report(
    folder: str | Path,
    out_dir: str | Path,
    *,
    seed: int = 20240601,
    temperature: bool = True,
    progress: bool = False,
    sensitivity_draws: int = 200,
    since: str | Path | None = None,
) -> Any:
    """:func:`comparo.report.build_report` with :func:`check` as its gate (the report of a
    dataset with errors lists them); the same options (``sensitivity_draws``: Monte Carlo
    draws of each fit's measurement-error sensitivity), the same ReportResult."""
    from comparo.report import build_report as build

    return build(
        folder,
        out_dir,
        gate=check,
        seed=seed,
        temperature=temperature,
        progress=progress,
        sensitivity_draws=sensitivity_draws,
        since=since,
    )
