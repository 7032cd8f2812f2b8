"""Validation: every problem of a dataset found in one pass.

Column rules (required, type, allowed values, sign, uniqueness) are read from
``schema/tables.toml`` and run on whole columns, so that all failures come back
at once; :func:`pandera_schema` states the same rules as pandera schemas, and
the tests check that pandera's lazy validation finds the same failures. Rules that span columns or
tables (units against the quantity catalogue, sources, computed and proxy
rows, temperature, plausible ranges, DOIs, binomial names) are vectorised
checks below. Each failure becomes a :class:`~comparo.base.errors.Problem` at the
row a spreadsheet shows.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from comparo.base.catalog import Catalog, load_catalog, read_schema
from comparo.base.errors import InputError, Problem, problems_frame, problems_from_frame
from comparo.base.results import Result
from comparo.reading.folder import RawDataset, cell_coordinates, read_folder
from comparo.reading.tables import RawTable
from comparo.validation.numbers import map_distinct
from comparo.validation.rows import (
    RowProblems,
    check_lineage_columns,
    check_names,
    check_plausible_range,
    check_quantity_names,
    check_sign,
    check_sources,
    check_temperature,
    check_uncertainty,
    typed_observations,
)
from comparo.validation.schema import column_problems
from comparo.validation.sources import normalise_dois, source_problems
from comparo.validation.synonyms import resolve_synonyms
from comparo.validation.temperature import temperature_policy, temperature_settings_problems
from comparo.validation.units import to_canonical_units


def observation_problems(
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    source_ids: set[str] | None,
    settings: dict[str, Any],
) -> tuple[pd.DataFrame, list[Problem]]:
    """Cross-column rules; returns the observations with canonical columns added."""
    c = RowProblems(raw.file, obs)
    qty = obs["quantity"]
    known = qty.isin(list(catalog))
    target_key = map_distinct(qty, lambda k: catalog.target(k).key if k in catalog else "")
    check_quantity_names(c, qty, known, catalog)
    to_canonical_units(c, raw, obs, catalog, qty, known, target_key)
    check_sign(c, obs, catalog, qty, target_key)
    if source_ids is not None:
        check_sources(c, obs, source_ids)
    check_lineage_columns(c, obs)
    check_temperature(c, raw, obs, catalog, qty, target_key)
    check_uncertainty(c, raw, obs)
    check_plausible_range(c, obs, catalog, target_key)
    check_names(c, obs)
    return obs, c.problems


def _number(v: Any) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def _settings_problems(settings: dict[str, Any], catalog: Catalog) -> list[Problem]:
    """Types and values of the settings that reading and harmonisation use (q10,
    activation_energy_kj_mol, conflict_factor, aggregate, quantities, title, seed)."""
    probs: list[Problem] = []

    def bad(key: str, value: Any, message: str, hint: str = "", severity: str = "error") -> None:
        probs.append(
            Problem(
                severity, "comparo.toml", None, key, str(value), "settings-value", message, hint
            )
        )

    for table, what, low, high, hint in (
        ("q10", "Q10", 0.0, 100.0, "typical biological Q10 is 2-3 (rule of thumb)"),
        (
            "activation_energy_kj_mol",
            "an activation energy in kJ/mol",
            0.0,
            1000.0,
            "muscle rate processes are of the order of 50-100 kJ/mol (rule of thumb)",
        ),
    ):
        given = settings.get(table, {})
        if not isinstance(given, dict):
            bad(
                table,
                given,
                f"[{table}] must be a table of quantity = number",
                f"for example [{table}] followed by attach_rate = 2.0",
            )
            continue
        for key, v in given.items():
            if key not in catalog:
                close = difflib.get_close_matches(key, list(catalog), n=1)
                bad(
                    f"{table}.{key}",
                    v,
                    f"{what} given for unknown quantity {key!r}",
                    f"did you mean {close[0]!r}?" if close else "use a catalogue key",
                )
            elif not _number(v) or not low < v <= high:
                bad(
                    f"{table}.{key}",
                    v,
                    f"{what} must be a number greater than {low:g} and at most {high:g}",
                    hint,
                )
            elif not catalog[key].temperature_sensitive:
                bad(
                    f"{table}.{key}",
                    v,
                    f"{key} is not temperature-sensitive; this value is ignored",
                    "",
                    "warning",
                )
    cf = settings.get("conflict_factor")
    if cf is not None and (not _number(cf) or cf <= 1):
        bad(
            "conflict_factor",
            cf,
            "conflict_factor must be a number greater than 1 (the ratio max/min above which two "
            "values of a taxon conflict)",
            "the default is 1.5 (common practice)",
        )
    agg = settings.get("aggregate")
    if agg is not None and agg not in ("mean", "median"):
        bad("aggregate", agg, 'aggregate must be "mean" or "median"')
    qs = settings.get("quantities")
    if qs is not None and not isinstance(qs, dict):
        bad(
            "quantities",
            qs,
            "[quantities] must hold one table per quantity key",
            'for example [quantities.twitch_time] followed by unit = "ms"',
        )
    title = settings.get("title")
    if title is not None and not isinstance(title, str):
        bad("title", title, "title must be text in quotes")
    seed = settings.get("seed")
    if seed is not None and (
        not isinstance(seed, int) or isinstance(seed, bool) or not 0 <= seed < 2**63
    ):
        bad("seed", seed, "seed must be a whole number from 0 to 2^63 - 1")
    return probs


# --------------------------------------------------------------------------- reserved names

# Columns comparo adds to the observation rows (validation, harmonisation, lineage).
RESERVED_OBSERVATION_COLUMNS = frozenset(
    {
        "row",
        "quantity_key",
        "value_canonical",
        "uncertainty_canonical",
        "unit_canonical",
        "basis_effective",
        "problem",
        "accepted",
        "u_h",
        "value_h",
        "temperature_factor",
        "temperature_note",
        "status",
        "reason",
        "merged_into",
        "value_harmonised",
        "u_standard",
        "q10_used",
        "ea_kj_mol_used",
        "temperature_rule",
        "value_temp_c",
    }
)
# Columns of the per-taxon table that are not quantities (a taxa.csv grouping column is copied
# into it).
RESERVED_TAXA_COLUMNS = frozenset({"temperature_c", "accepted", "own"})


def _reserved(name: str, fixed: frozenset[str], keys: frozenset[str]) -> bool:
    return (
        name in fixed
        or name.startswith("_")
        or name in keys
        or any(name.startswith(k + "_") for k in keys)
    )


def reserved_column_problems(raw: RawDataset, catalog: Catalog) -> list[Problem]:
    """Column names a user's table may not use because comparo adds a column of that
    name: in observations the columns listed in :data:`RESERVED_OBSERVATION_COLUMNS`; in
    taxa.csv (whose extra columns join the per-taxon table) any quantity, derived or
    ratio key, ``KEY_...`` for such a key and ``temperature_c``; in both, names starting
    with ``_``. Each is renamed ``NAME (yours)`` in the working copy so that checking
    goes on (the problem is an error: nothing is analysed until it is renamed)."""
    probs: list[Problem] = []
    derived = read_schema("derived.toml").get("keys", {})
    ratios = raw.settings.get("ratios") if isinstance(raw.settings.get("ratios"), dict) else {}
    keys = frozenset(catalog) | frozenset(derived) | frozenset(map(str, ratios))
    spec = read_schema("tables.toml")
    for table, fixed, scope in (
        (raw.observations, RESERVED_OBSERVATION_COLUMNS, frozenset()),
        (raw.taxa, RESERVED_TAXA_COLUMNS, keys),
    ):
        if table is None:
            continue
        own = spec["observations" if table is raw.observations else "taxa"]["columns"]
        clash = [c for c in table.frame.columns if c not in own and _reserved(str(c), fixed, scope)]
        for c in clash:
            probs.append(
                Problem(
                    "error",
                    table.file,
                    None,
                    str(c),
                    None,
                    "column-reserved",
                    f"column name {c!r} is used by comparo for a column of its own",
                    f"rename the column (for example to 'my_{str(c).lstrip('_')}')",
                )
            )
        if clash:
            table.frame = table.frame.rename(columns={c: f"{c} (yours)" for c in clash})
    return probs


# --------------------------------------------------------------------------- entry points


@dataclass
class Dataset(Result):
    """A validated dataset folder.

    Attributes
    ----------
    observations : pandas.DataFrame
        The observation rows as typed (numbers parsed) plus, added by comparo:
        ``row`` (spreadsheet row), ``quantity_key`` (catalogue key the value is
        stored as, e.g. ``fiber_radius`` for a reported ``fiber_diameter``),
        ``value_canonical`` and ``uncertainty_canonical`` (in ``unit_canonical``,
        the catalogue's canonical unit) and ``basis_effective`` (``computed`` where
        comparo converted a diameter).
    sources, taxa : pandas.DataFrame
        Bibliography and the optional taxa table (``None`` when absent).
    tree : dendropy.Tree or None
    settings : dict
        Parsed comparo.toml (empty when absent).
    catalog : comparo.base.catalog.Catalog
    problems : pandas.DataFrame
        Warnings found while loading (and errors when loaded with ``strict=False``).
    """

    folder: Path
    observations: Any
    sources: Any
    taxa: Any
    tree: Any
    settings: dict[str, Any]
    catalog: Any
    problems: Any
    files: dict[str, Path]
    tree_text: str | None = None
    # comparo.reading.tables.RawTable of traces.csv, or None (reduced by comparo.traces.files)
    traces: Any = None

    @property
    def rows_read(self) -> int:
        """Number of observation rows read (blank lines excluded)."""
        return len(self.observations)

    @property
    def reference_temperature_c(self) -> float:
        """Reference temperature in °C for normalising rates (settings, default 25; with
        ``reference_temperature_c = "operating"``, the fallback for taxa without an
        operating temperature, ``[temperature] fallback_c``)."""
        return temperature_policy(self.settings).reference_c

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe account: folder, files, rows, sources, taxa, tree tips, problems."""
        sev = self.problems["severity"] if self.problems is not None else pd.Series([], dtype=str)
        return {
            "folder": str(self.folder),
            "files": {k: str(v) for k, v in self.files.items()},
            "rows_read": int(self.rows_read),
            "sources": int(len(self.sources)),
            "taxa": None if self.taxa is None else int(len(self.taxa)),
            "tree": self.tree is not None or self.tree_text is not None,
            "errors": int((sev == "error").sum()),
            "warnings": int((sev == "warning").sum()),
        }

    def to_frame(self) -> pd.DataFrame:
        """The observation rows (:attr:`observations`)."""
        return self.observations

    def summary(self) -> str:
        """Plain text: the folder and the counts of :meth:`to_dict`."""
        d = self.to_dict()
        taxa = "no taxa table" if d["taxa"] is None else f"{d['taxa']} taxa"
        return (
            f"dataset {d['folder']}\n  {d['rows_read']} observation rows, {d['sources']} sources,"
            f" {taxa}, {'a' if d['tree'] else 'no'} tree; {d['errors']} error(s),"
            f" {d['warnings']} warning(s)"
        )


def validate(raw: RawDataset) -> tuple[Dataset | None, list[Problem]]:
    """Validate what :func:`comparo.reading.folder.read_folder` read.

    Returns the :class:`Dataset` (``None`` when a table could not be
    read at all) and every problem found; each observation row also carries
    ``problem`` (its first error, empty when none).
    """
    problems = list(raw.problems)
    try:
        extra = raw.settings.get("quantities")
        catalog = load_catalog(extra if isinstance(extra, dict) else None)
    except InputError as exc:
        problems += problems_from_frame(exc.problems)
        catalog = load_catalog()
    problems += _settings_problems(raw.settings, catalog)
    taxa_frame = raw.taxa.frame if raw.taxa is not None else None
    problems += temperature_settings_problems(raw.settings, catalog, taxa_frame)
    if raw.observations is None or raw.sources is None:
        return None, cell_coordinates(raw, problems)
    problems += reserved_column_problems(raw, catalog)
    problems += column_problems(raw.observations, "observations")
    problems += column_problems(raw.sources, "sources")
    problems += source_problems(raw.sources)
    if raw.taxa is not None:
        problems += column_problems(raw.taxa, "taxa")
    missing_cols = {
        p.column for p in problems if p.rule == "missing-column" and p.file == raw.observations.file
    }
    obs = typed_observations(raw.observations)
    source_ids = set(raw.sources.frame["source_id"]) if "source_id" in raw.sources.frame else None
    if not missing_cols & {"quantity", "unit", "value"}:
        obs, p = observation_problems(raw.observations, obs, catalog, source_ids, raw.settings)
        problems += p
    else:
        for c in ("quantity_key", "unit_canonical", "basis_effective"):
            obs[c] = ""
        obs["value_canonical"] = np.nan
        obs["uncertainty_canonical"] = np.nan
    first_error = {}
    for p in problems:
        if (
            p.severity == "error"
            and p.file == raw.observations.file
            and p.row is not None
            and p.row not in first_error
        ):
            first_error[p.row] = f"{p.rule}: {p.message}"
    obs["problem"] = [first_error.get(r, "") for r in obs["row"]]
    sources = raw.sources.frame.copy()
    if "doi" in sources:  # one form for links and exports: the bare 10.xxxx/... name
        sources["doi"] = normalise_dois(sources["doi"])
    taxa = None
    if raw.taxa is not None:
        taxa = raw.taxa.frame.copy()
        synonyms, p = resolve_synonyms(raw.taxa)
        problems += p
        if "accepted_name" in taxa:  # chains resolved to their end; names in a cycle stay unmapped
            taxa["accepted_name"] = [
                synonyms.get(t, "" if a != t else a)
                for t, a in zip(taxa["taxon"], taxa["accepted_name"], strict=True)
            ]
    ds = Dataset(
        folder=raw.folder,
        observations=obs,
        sources=sources,
        taxa=taxa,
        tree=raw.tree,
        settings=raw.settings,
        catalog=catalog,
        problems=None,
        files=raw.files,
        tree_text=raw.tree_text,
        traces=raw.traces,
    )
    return ds, cell_coordinates(raw, problems)


@dataclass(frozen=True)
class CheckResult(Result):
    """Outcome of checking a dataset folder.

    Attributes
    ----------
    folder : str
    rows_read : int
        Observation rows read (blank lines are not rows).
    problems : pandas.DataFrame
        Every problem, errors first (columns of :data:`comparo.base.errors.PROBLEM_COLUMNS`).
    """

    folder: str
    rows_read: int
    problems: pd.DataFrame
    dataset: Dataset | None = None  # the validated dataset (None when unreadable)
    rows_from_traces: int = (
        0  # rows computed from the traces of traces.csv (counted once the table has no errors)
    )

    @property
    def n_errors(self) -> int:
        return int((self.problems["severity"] == "error").sum())

    @property
    def n_warnings(self) -> int:
        return int((self.problems["severity"] == "warning").sum())

    @property
    def n_notes(self) -> int:
        return int((self.problems["severity"] == "note").sum())

    @property
    def ok(self) -> bool:
        return self.n_errors == 0

    def to_dict(self) -> dict[str, Any]:
        recs = self.problems.astype(object).where(self.problems.notna(), None).to_dict("records")
        return {
            "folder": self.folder,
            "rows_read": self.rows_read,
            "rows_from_traces": self.rows_from_traces,
            "errors": self.n_errors,
            "warnings": self.n_warnings,
            "notes": self.n_notes,
            "problems": recs,
        }

    def to_frame(self) -> pd.DataFrame:
        return self.problems

    def _repr_html_(self) -> str:
        """Compact HTML for notebooks: the summary line and the first 20 problems."""
        import html

        shown = self.problems.head(20)[
            ["severity", "file", "row", "column", "value", "rule", "message"]
        ]
        more = f"<p>... and {len(self.problems) - 20} more</p>" if len(self.problems) > 20 else ""
        return (
            f"<p>{html.escape(self.summary())}</p>"
            + shown.to_html(index=False, escape=True, na_rep="")
            + more
        )

    def summary(self) -> str:
        verdict = "no errors" if self.ok else f"{self.n_errors} error(s)"
        traces = ""
        if self.rows_from_traces:
            traces = (
                f", and {self.rows_from_traces} computed from the traces of traces.csv "
                f"({self.rows_read + self.rows_from_traces} rows in all, as audit and the report "
                "count them)"
            )
        return (
            f"{self.folder}: {self.rows_read} observation row(s) read{traces}; {verdict}, "
            f"{self.n_warnings} warning(s), {self.n_notes} note(s)"
        )


def require_dataset(ds: Any, name: str = "ds") -> Dataset:
    """*ds* when it is a :class:`Dataset`; else a UsageError saying what is accepted
    (:func:`comparo.validation.dataset.as_dataset` also reads a folder)."""
    from comparo.base.arguments import check_kind

    return check_kind(
        ds, Dataset, name, "a Dataset or a dataset folder, such as comparo.load(FOLDER) reads"
    )


def folder_of(ds: Any) -> Any:
    """The folder of a :class:`Dataset`; anything else as given (a path, checked where used).
    For the functions that read the folder again themselves (check, report, merge)."""
    return ds.folder if isinstance(ds, Dataset) else ds


def check(folder) -> CheckResult:
    """Validate a dataset folder and return every problem found (never raises for
    bad cells; raises :class:`~comparo.InputError` only when the folder itself is missing).
    A loaded :class:`Dataset` is checked again from its folder."""
    folder = folder_of(folder)
    raw = read_folder(folder)
    ds, problems = validate(raw)
    rows = len(raw.observations) if raw.observations is not None else 0
    frame = problems_frame(problems)
    if ds is not None:
        ds.problems = frame
    return CheckResult(str(folder), rows, frame, ds)
