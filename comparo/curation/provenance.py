"""Provenance: where every number came from, and the proof that no row was lost.

:func:`audit` answers the questions a reviewer asks of a compilation: how many
rows were read, used, merged as duplicates and excluded (and why); which
values conflict; which look like unit slips; how much of each quantity rests
on digitized figures, proxies and assumptions; what each source contributes;
and the weakest basis behind each taxon's value of each quantity.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from comparo.base.results import Result
from comparo.curation.aggregation import per_taxon
from comparo.curation.harmonise import Harmonised, harmonise
from comparo.validation.numbers import map_distinct
from comparo.validation.rows import BASIS_ORDER
from comparo.validation.tables import Dataset


@dataclass(frozen=True)
class AuditReport(Result):
    """Provenance audit of a dataset (the ``comparo audit --format json`` object).

    ``rows_used + rows_merged + len(rows_excluded) == rows_read`` always.
    ``basis_shares`` are fractions (0-1) of the used rows of each quantity.
    """

    rows_read: int
    rows_used: int
    rows_merged: int
    rows_excluded: list[dict[str, Any]]
    merged: list[dict[str, Any]]
    conflicts: list[dict[str, Any]]
    unit_slips: list[dict[str, Any]]
    out_of_range: list[str]
    basis_shares: dict[str, dict[str, float]]
    sources: dict[str, dict[str, Any]]
    coverage: dict[str, dict[str, str]]
    synonyms: dict[str, str] = field(default_factory=dict)
    temperature: dict[str, Any] = field(default_factory=dict)
    rows_missing_locator: list[str] = field(default_factory=list)
    rows_missing_temperature: list[str] = field(default_factory=list)
    sources_uncited: list[str] = field(default_factory=list)
    sources_missing: list[str] = field(default_factory=list)
    trust: dict[str, str] = field(default_factory=dict)
    rows_from_traces: int = 0  # of rows_read: rows computed from the traces of traces.csv
    # values far from what relatives on the tree predict (comparo.phylo.outliers)
    phylo_outliers: list[dict[str, Any]] = field(default_factory=list)
    phylo_checked: list[str] = field(default_factory=list)
    phylo_skipped: dict[str, str] = field(default_factory=dict)
    phylo_note: str = ""
    phylo_flagged: list[dict[str, Any]] = field(default_factory=list)  # per taxon, with the range
    # per quantity of [impute]: values imputed into the table (comparo.phylo.completion)
    imputed: dict[str, dict[str, Any]] = field(default_factory=dict)

    @property
    def balanced(self) -> bool:
        """True when every row read is accounted for."""
        return self.rows_used + self.rows_merged + len(self.rows_excluded) == self.rows_read

    def to_dict(self) -> dict[str, Any]:
        return {
            "rows_read": self.rows_read,
            "rows_from_traces": self.rows_from_traces,
            "rows_used": self.rows_used,
            "rows_merged": self.rows_merged,
            "rows_excluded": self.rows_excluded,
            "merged": self.merged,
            "balanced": self.balanced,
            "conflicts": self.conflicts,
            "unit_slips": self.unit_slips,
            "out_of_range": self.out_of_range,
            "basis_shares": self.basis_shares,
            "sources": self.sources,
            "coverage": self.coverage,
            "synonyms": self.synonyms,
            "temperature": self.temperature,
            "rows_missing_locator": self.rows_missing_locator,
            "rows_missing_temperature": self.rows_missing_temperature,
            "sources_uncited": self.sources_uncited,
            "sources_missing": self.sources_missing,
            "trust": self.trust,
            "phylo_outliers": self.phylo_outliers,
            "phylo_checked": self.phylo_checked,
            "phylo_skipped": self.phylo_skipped,
            "phylo_note": self.phylo_note,
            "imputed": self.imputed,
        }

    def to_frame(self) -> pd.DataFrame:
        """Coverage as a table: taxon x quantity, cells = weakest basis ('' = no value)."""
        frame = pd.DataFrame.from_dict(self.coverage, orient="index").fillna("")
        frame.index.name = "taxon"
        frame.insert(0, "trust", [self.trust.get(t, "") for t in frame.index])
        return frame.reset_index()

    def counts_frame(self) -> pd.DataFrame:
        """The audit in numbers, one row per count (what a notebook shows)."""
        grades = pd.Series(self.trust, dtype=object).value_counts()
        rows = [
            ("rows read", self.rows_read),
            ("rows used", self.rows_used),
            ("rows merged (duplicates)", self.rows_merged),
            ("rows excluded", len(self.rows_excluded)),
            ("conflicts", len(self.conflicts)),
            ("suspected unit slips", len(self.unit_slips)),
            ("out of plausible range", len(self.out_of_range)),
            ("far from what relatives predict", len(self.phylo_flagged)),
            ("taxa", len(self.coverage)),
            ("sources", len(self.sources)),
            *[(f"taxa graded {g}", int(grades.get(g, 0))) for g in TRUST_GRADES],
        ]
        return pd.DataFrame(rows, columns=["count", "value"])

    def _repr_html_(self) -> str:
        """Compact HTML table for notebooks: the counts, and whether they add up."""
        head = (
            "<p><b>comparo audit</b>: rows "
            + ("balanced" if self.balanced else "<b>do not add up</b>")
            + "</p>"
        )
        return head + self.counts_frame().to_html(index=False, escape=True)

    def sources_frame(self) -> pd.DataFrame:
        """Per source: values used and taxa covered."""
        return pd.DataFrame([{"source_id": k, **v} for k, v in self.sources.items()])

    def _traces_part(self) -> str:
        t = self.rows_from_traces
        return (
            f" ({self.rows_read - t} from the observations table, {t} computed from the traces of "
            "traces.csv)"
            if t
            else ""
        )

    def summary(self) -> str:
        lines = [
            f"rows read {self.rows_read}{self._traces_part()}: used {self.rows_used}, merged "
            f"{self.rows_merged} (duplicates), excluded {len(self.rows_excluded)}"
            + ("" if self.balanced else "  ** COUNTS DO NOT ADD UP **"),
            f"conflicts {len(self.conflicts)}, suspected unit slips {len(self.unit_slips)}, out of "
            f"plausible range {len(self.out_of_range)}",
        ]
        weak = {q: 1.0 - s.get("reported", 0.0) for q, s in self.basis_shares.items()}
        shaky = [
            f"{q} {100 * w:.0f}%" for q, w in sorted(weak.items(), key=lambda kv: -kv[1]) if w > 0
        ]
        if shaky:
            lines.append(
                "share not printed in a source (computed, digitized, proxy or assumed): "
                + ", ".join(shaky)
            )
        if self.sources_uncited or self.sources_missing:
            lines.append(
                f"sources never cited: {len(self.sources_uncited)}; cited but missing from the "
                f"sources table: {len(self.sources_missing)}"
            )
        t = self.temperature or {}
        if t.get("to"):
            lines.append(
                f"temperature: {t.get('normalised', 0)} value(s) rescaled to {t['to']}"
                + (
                    f" ({t['reference_temperature_c']:g} °C for taxa without one)"
                    if t["to"] == "operating temperature"
                    else ""
                )
                + f", {len(t.get('kept_as_measured', []))} kept as measured "
                "(in vivo, regulating taxa), "
                f"{len(t.get('without_temperature', []))} without a temperature (used as measured)"
            )
        lines += self._phylo_lines()
        grades = pd.Series(self.trust).value_counts()
        lines.append("trust grades: " + ", ".join(f"{g} {grades.get(g, 0)}" for g in TRUST_GRADES))
        return "\n".join(lines)

    def _phylo_lines(self) -> list[str]:
        """The check against relatives: what was checked, then one line per flagged value."""
        lines = [self.phylo_note] if self.phylo_note else []
        if self.phylo_checked:
            lines.append("  checked: " + ", ".join(self.phylo_checked))
        for f in self.phylo_flagged:
            lo, hi = f["range"]
            lines.append(
                f"  {f['quantity']} of {f['taxon']} ({', '.join(f['obs_ids'])}): {f['value']:.4g} "
                f"{f['unit']}, {f['ratio']:.3g} times the {f['predicted']:.3g} {f['unit']} its "
                f"relatives predict (95% range {lo:.3g} to {hi:.3g}), z = {f['z']:.2f}"
            )
        return lines


TRUST_GRADES = ("firm", "read-off", "borrowed", "contested", "sparse")
TRUST_MEANING = {
    "firm": (
        "every value printed in a source or computed from printed values; at least 3 quantities"
    ),
    "read-off": "at least one value read off a figure (digitized); none borrowed or contested",
    "borrowed": "at least one value is a proxy (from a related taxon) or assumed",
    "contested": "a conflict between sources, or a suspected unit slip, touches this taxon",
    "sparse": "values printed in sources, but fewer than 3 quantities",
}


def trust_grade(coverage: dict[str, str], contested: bool) -> str:
    """One-word trust grade of a taxon (comparo's own scheme; see :data:`TRUST_MEANING`).

    Checked in order: contested > borrowed > read-off > sparse > firm.
    """
    bases = set(coverage.values())
    if contested:
        return "contested"
    if bases & {"proxy", "assumed"}:
        return "borrowed"
    if "digitized" in bases:
        return "read-off"
    if len(coverage) < 3:
        return "sparse"
    return "firm"


def audit(
    ds: Dataset,
    *,
    temperature: bool = True,
    harmonised: Harmonised | None = None,
    table: pd.DataFrame | None = None,
    phylo: Any = None,
    imputed: dict[str, dict[str, Any]] | None = None,
) -> AuditReport:
    """Provenance audit of a loaded dataset (see :class:`AuditReport`).

    *phylo* is the check of the values against their relatives on the tree
    (:func:`comparo.phylo.outliers.phylo_outliers` of the dataset and its per-taxon table,
    a :class:`~comparo.phylo.outliers.PhyloCheck`), which fills the ``phylo_*`` keys; the
    public ``comparo.audit`` (:func:`comparo.pipeline.audit`) passes it. Without it, those
    keys say the check was not run. *harmonised* and *table* (its per-taxon table) are
    used when given, computed otherwise.

    Load with ``comparo.load(folder, strict=False)`` to audit a table that still
    has errors: rows with errors are then listed as excluded with their rule.
    """
    from comparo.validation.dataset import as_dataset

    ds = as_dataset(ds)
    h = harmonised or harmonise(ds, temperature=temperature)
    rows = h.rows
    used = rows[rows["status"] == "used"]
    excl = rows[rows["status"] == "excluded"]
    merged = rows[rows["status"] == "merged"]
    shares: dict[str, dict[str, float]] = {}
    for q, part in used.groupby("quantity_key", sort=True):
        counts = part["basis_effective"].value_counts(normalize=True)
        shares[q] = {b: float(counts.get(b, 0.0)) for b in BASIS_ORDER if counts.get(b, 0.0) > 0}
    sources: dict[str, dict[str, Any]] = {}
    by_src = used.groupby("source_id", sort=False)
    n_values, n_taxa = by_src.size(), by_src["accepted"].nunique()
    quantities = by_src["quantity_key"].agg(lambda s: sorted(s.unique().tolist()))
    for sid in ds.sources["source_id"]:
        sources[sid] = {
            "values": int(n_values.get(sid, 0)),
            "taxa": int(n_taxa.get(sid, 0)),
            "quantities": list(quantities.get(sid, [])),
        }
    tab = table if table is not None else per_taxon(ds, temperature=temperature, harmonised=h)
    coverage: dict[str, dict[str, str]] = {}
    basis_cols = [c for c in tab.columns if c.endswith("_basis")]
    for rec in tab[["taxon", *basis_cols]].to_dict("records"):
        coverage[rec["taxon"]] = {c[: -len("_basis")]: rec[c] for c in basis_cols if rec[c]}
    oor = []
    if ds.problems is not None and len(ds.problems):
        file = ds.files["observations"].name if "observations" in ds.files else ""
        rws = ds.problems[
            (ds.problems["rule"] == "out-of-range")
            & ds.problems["file"].astype(str).str.startswith(file)
        ]["row"]
        own = (
            rows[rows["_origin"] == ""] if "_origin" in rows else rows
        )  # rows of the observations table
        row_to_id = dict(zip(own["row"], own["obs_id"], strict=True))
        oor = [row_to_id[int(r)] for r in rws if int(r) in row_to_id]
    synonyms = {t: a for t, a in zip(rows["taxon"], rows["accepted"], strict=True) if t != a}
    contested = {c["taxon"] for c in h.conflicts} | {s["taxon"] for s in h.unit_slips}
    trust = {t: trust_grade(cov, t in contested) for t, cov in coverage.items()}
    cited = set(rows["source_id"]) - {""}
    listed = set(ds.sources["source_id"]) if "source_id" in ds.sources else set()
    cat = ds.catalog
    ts = map_distinct(
        rows["quantity_key"], lambda k: bool(k) and k in cat and cat[k].temperature_sensitive
    )
    missing_temp = rows.loc[ts & rows["temperature_c"].isna(), "obs_id"].tolist()
    ts = rows[rows["temperature_note"] != ""]
    temp = {
        "reference_temperature_c": h.reference_temperature_c,
        "normalised": int((ts["temperature_factor"] != 1.0).sum())
        if h.reference_temperature_c is not None
        else 0,
        "without_temperature": ts.loc[
            ts["temperature_note"].str.startswith("no temperature"), "obs_id"
        ].tolist(),
        "kept_as_measured": ts.loc[
            ts["temperature_note"].str.startswith("kept as measured"), "obs_id"
        ].tolist(),
        "to": h.policy.target_text if h.policy is not None else None,
    }
    return AuditReport(
        rows_read=len(rows),
        rows_from_traces=int((rows["_origin"] != "").sum()) if "_origin" in rows else 0,
        rows_used=len(used),
        rows_merged=len(merged),
        rows_excluded=[
            {"obs_id": o, "row": int(r), "reason": why}
            for o, r, why in zip(excl["obs_id"], excl["row"], excl["reason"], strict=True)
        ],
        merged=[
            {"obs_id": o, "row": int(r), "into": m}
            for o, r, m in zip(merged["obs_id"], merged["row"], merged["merged_into"], strict=True)
        ],
        conflicts=h.conflicts,
        unit_slips=h.unit_slips,
        out_of_range=oor,
        basis_shares=shares,
        sources=sources,
        coverage=coverage,
        synonyms=synonyms,
        temperature=temp,
        rows_missing_locator=rows.loc[rows["locator"] == "", "obs_id"].tolist(),
        rows_missing_temperature=missing_temp,
        sources_uncited=sorted(listed - cited),
        sources_missing=sorted(cited - listed),
        trust=trust,
        **_phylo_keys(phylo),
        imputed=dict(imputed or {}),
    )


def _phylo_keys(phylo: Any) -> dict[str, Any]:
    """The ``phylo_*`` fields of :class:`AuditReport` from a PhyloCheck (or, without one,
    a note that the check against relatives was not run)."""
    if phylo is None:
        return {"phylo_note": NOT_CHECKED}
    return {
        "phylo_outliers": phylo.outliers,
        "phylo_checked": phylo.checked,
        "phylo_skipped": phylo.skipped,
        "phylo_note": phylo.note,
        "phylo_flagged": phylo.flagged,
    }


#: The audit's ``phylo_note`` when the check against relatives was not run.
NOT_CHECKED = "values not checked against relatives on the tree (use comparo.audit)"


def lineage(
    ds: Dataset, *, temperature: bool = True, harmonised: Harmonised | None = None
) -> pd.DataFrame:
    """Every observation row with its fate and the harmonisation applied: accepted
    name, quantity key, canonical value and unit, temperature factor with the Q10
    (``q10_used``) or activation energy (``ea_kj_mol_used``, kJ/mol) applied, standard
    uncertainty, status (used/merged/excluded) and reason."""
    h = harmonised or harmonise(ds, temperature=temperature)
    cols = [
        "obs_id",
        "row",
        "taxon",
        "accepted",
        "quantity",
        "quantity_key",
        "value",
        "unit",
        "value_canonical",
        "unit_canonical",
        "temperature_c",
        "temperature_factor",
        "q10_used",
        "ea_kj_mol_used",
        "temperature_note",
        "value_h",
        "u_h",
        "basis",
        "basis_effective",
        "source_id",
        "locator",
        "status",
        "merged_into",
        "reason",
    ]
    return h.rows[cols].rename(columns={"value_h": "value_harmonised", "u_h": "u_standard"})


def temperature_rules(harmonised: Harmonised) -> pd.DataFrame:
    """How each temperature-sensitive quantity was brought to the reference temperature.

    One row per quantity and rule applied: ``quantity_key``, ``reference_temperature_c``
    (°C), ``rule`` (``Q10``, ``Arrhenius``, ``as measured``: an endotherm's in-vivo value,
    or a heterotherm's at its operating temperature, or ``none``: no temperature given, or
    normalisation off), ``q10`` (dimensionless), ``ea_kj_mol`` (kJ/mol), ``rows`` (observation
    rows used or merged), ``factor_min`` and ``factor_max`` (the temperature factors applied,
    dimensionless). Rows that were excluded are not counted.
    """
    import numpy as np

    rows = harmonised.rows
    rows = rows[(rows["temperature_note"] != "") & (rows["status"] != "excluded")]
    cols = [
        "quantity_key",
        "reference_temperature_c",
        "rule",
        "q10",
        "ea_kj_mol",
        "rows",
        "factor_min",
        "factor_max",
    ]
    if not len(rows):
        return pd.DataFrame(columns=cols)
    q10, ea = rows["q10_used"].to_numpy(float), rows["ea_kj_mol_used"].to_numpy(float)
    rule = np.where(np.isfinite(ea), "Arrhenius", np.where(np.isfinite(q10), "Q10", "none"))
    if "temperature_rule" in rows:  # "as measured": an endotherm's in-vivo value
        given = rows["temperature_rule"].fillna("").astype(str).to_numpy(object)
        rule = np.where(given != "", given, rule)
    part = pd.DataFrame(
        {
            "quantity_key": rows["quantity_key"].to_numpy(),
            "rule": rule,
            "q10": q10,
            "ea_kj_mol": ea,
            "factor": rows["temperature_factor"].to_numpy(float),
        }
    )
    out = (
        part.groupby(["quantity_key", "rule", "q10", "ea_kj_mol"], dropna=False, sort=True)[
            "factor"
        ]
        .agg(rows="size", factor_min="min", factor_max="max")
        .reset_index()
    )
    out.insert(1, "reference_temperature_c", harmonised.reference_temperature_c)
    return out[cols]
