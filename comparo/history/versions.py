"""Two versions of a compilation compared in its own terms: :func:`diff`.

What changed (rows matched by ``obs_id``, then by content; sources; taxon names, synonyms,
groups; tree tips; settings), how each per-taxon value moved in units of its combined
standard uncertainty, and how every declared analysis and every regime moved. The rules are
in docs/versions.md. Both versions are loaded and validated first; nothing is written.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from comparo.base.display import html_table
from comparo.base.jsonsafe import finite_or_none, json_safe
from comparo.base.results import Result

#: Relative tolerance under which two values in canonical units count as the same (a unit
#: change such as 12 um -> 0.012 mm leaves rounding of this order).
SAME_RTOL = 1e-9
#: Columns of the validated observation frame that are computed, not typed by the curator.
_COMPUTED = (
    "row",
    "quantity_key",
    "value_canonical",
    "uncertainty_canonical",
    "unit_canonical",
    "basis_effective",
    "problem",
)


# --------------------------------------------------------------------------- small helpers


def _plain(v: Any) -> Any:
    """A cell as a JSON value: missing -> None, numbers as float/int, text as text."""
    if v is None:
        return None
    if isinstance(v, str):
        return v if v != "" else None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(f):
        return None
    return int(f) if f.is_integer() and abs(f) < 2**53 and not isinstance(v, float) else f


def _same_number(a: Any, b: Any) -> bool:
    fa, fb = finite_or_none(a), finite_or_none(b)
    if fa is None or fb is None:
        return fa is None and fb is None
    return math.isclose(fa, fb, rel_tol=SAME_RTOL, abs_tol=0.0)


def _label(x: Any) -> str:
    return str(getattr(x, "folder", None) or x)


def _load(x: Any):
    from comparo.validation.dataset import load

    return x if hasattr(x, "observations") else load(x)


# --------------------------------------------------------------------------- rows


def _content_key(obs) -> Any:
    """taxon, quantity, source, locator (case and spaces ignored) and the value in canonical
    units to 6 significant digits: how a row whose obs_id changed is found again."""
    v6 = obs["value_canonical"].map(lambda v: f"{v:.6g}" if v == v else "")
    loc = obs["locator"].astype(str).str.lower().str.replace(r"\s+", "", regex=True)
    return (
        obs["taxon"].astype(str)
        + "\x1f"
        + obs["quantity_key"].astype(str)
        + "\x1f"
        + obs["source_id"].astype(str)
        + "\x1f"
        + loc
        + "\x1f"
        + v6
    )


def _column_changes(o, n, columns: list[str]) -> list[tuple[int, int, dict]]:
    """(row position in new, column position, entry) for each changed cell of aligned frames."""
    import numpy as np
    import pandas as pd

    out: list[tuple[int, int, dict]] = []
    if len(o) == 0:
        return out
    same_value = np.array(
        [
            _same_number(a, b)
            for a, b in zip(o["value_canonical"], n["value_canonical"], strict=True)
        ]
    )
    same_value &= o["quantity_key"].to_numpy(object) == n["quantity_key"].to_numpy(object)
    same_u = np.array(
        [
            _same_number(a, b)
            for a, b in zip(o["uncertainty_canonical"], n["uncertainty_canonical"], strict=True)
        ]
    )
    pos = n["_pos"].to_numpy(int)
    ids = n["obs_id"].to_numpy(object)
    for j, c in enumerate(columns):
        a = o[c] if c in o else pd.Series([None] * len(o), index=o.index)
        b = n[c] if c in n else pd.Series([None] * len(n), index=n.index)
        if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b):
            av, bv = a.to_numpy(float), b.to_numpy(float)
            differ = ~((av == bv) | (np.isnan(av) & np.isnan(bv)))
        else:
            av = a.fillna("").astype(str).to_numpy(object)
            bv = b.fillna("").astype(str).to_numpy(object)
            differ = av != bv
        for i in np.flatnonzero(differ):
            kind = "changed"
            if c in ("value", "unit") and same_value[i]:
                kind = "unit_only"
            elif c == "uncertainty" and same_u[i]:
                kind = "unit_only"
            elif c == "obs_id":
                kind = "id_changed"
            out.append(
                (
                    int(pos[i]),
                    j,
                    {
                        "obs_id": ids[i],
                        "column": c,
                        "old": _plain(a.iloc[i]),
                        "new": _plain(b.iloc[i]),
                        "kind": kind,
                    },
                )
            )
    return out


def row_changes(old, new) -> dict[str, list]:
    """Observations added, removed and changed between two datasets (see docs/versions.md).

    Rows are matched by ``obs_id``; a removed and an added row with the same content key
    (taxon, quantity, source_id, locator, value in canonical units to 6 significant digits)
    are the same row whose id changed, matched one to one in file order. Each changed cell is
    ``{"obs_id", "column", "old", "new", "kind"}`` with kind ``changed``, ``unit_only`` (value,
    unit or uncertainty written differently, the same in canonical units) or ``id_changed``.
    """
    import pandas as pd

    o = old.observations.assign(_pos=range(len(old.observations)))
    n = new.observations.assign(_pos=range(len(new.observations)))
    skip = {*_COMPUTED, "_pos"}
    columns = ["obs_id"] + [
        c for c in dict.fromkeys([*o.columns, *n.columns]) if c not in skip and c != "obs_id"
    ]
    old_ids, new_ids = set(o["obs_id"]), set(n["obs_id"])
    gone = o[~o["obs_id"].isin(new_ids)]
    came = n[~n["obs_id"].isin(old_ids)]
    pairs: list[tuple[Any, Any]] = []
    if len(gone) and len(came):
        gk, ck = _content_key(gone), _content_key(came)
        free: dict[str, list] = {}
        for i, k in zip(gone.index, gk, strict=True):
            free.setdefault(k, []).append(i)
        for j, k in zip(came.index, ck, strict=True):
            if free.get(k):
                pairs.append((free[k].pop(0), j))
    paired_old = {i for i, _ in pairs}
    paired_new = {j for _, j in pairs}
    removed = [x for i, x in zip(gone.index, gone["obs_id"], strict=True) if i not in paired_old]
    added = [x for j, x in zip(came.index, came["obs_id"], strict=True) if j not in paired_new]

    both = n[n["obs_id"].isin(old_ids)]
    o_aligned = o.set_index("obs_id").loc[both["obs_id"]].reset_index()
    o_rows = [o_aligned]
    n_rows = [both.reset_index(drop=True)]
    if pairs:
        o_rows.append(o.loc[[i for i, _ in pairs]].reset_index(drop=True))
        n_rows.append(n.loc[[j for _, j in pairs]].reset_index(drop=True))
    oa = pd.concat(o_rows, ignore_index=True)
    na = pd.concat(n_rows, ignore_index=True)
    changes = _column_changes(oa, na, columns)
    changes.sort(key=lambda t: (t[0], t[1]))
    return {
        "added": [str(x) for x in added],
        "removed": [str(x) for x in removed],
        "changed": [c for _, _, c in changes],
    }


# --------------------------------------------------------------------------- sources, names, tree


def source_changes(old, new) -> dict[str, list]:
    """Sources added, removed and changed (each changed column of sources.csv, by source_id)."""

    def table(ds) -> dict[str, dict[str, Any]]:
        s = ds.sources
        return {str(r["source_id"]): r for r in s.to_dict("records")} if s is not None else {}

    a, b = table(old), table(new)
    cols = [
        c
        for c in dict.fromkeys(
            [
                *(old.sources.columns if old.sources is not None else []),
                *(new.sources.columns if new.sources is not None else []),
            ]
        )
        if c not in ("source_id", "row")
    ]
    changed = []
    for sid in b:
        if sid not in a:
            continue
        for c in cols:
            va, vb = _plain(a[sid].get(c)), _plain(b[sid].get(c))
            if (
                isinstance(va, int | float)
                and isinstance(vb, int | float)
                and float(va) == float(vb)
            ):
                continue
            if va != vb:
                changed.append({"source_id": sid, "column": c, "old": va, "new": vb})
    return {
        "added": [s for s in b if s not in a],
        "removed": [s for s in a if s not in b],
        "changed": changed,
    }


def _synonyms(ds) -> dict[str, str]:
    t = ds.taxa
    if t is None or "accepted_name" not in t or "taxon" not in t:
        return {}
    return {
        str(x): str(y)
        for x, y in zip(t["taxon"], t["accepted_name"], strict=True)
        if y and str(y) != str(x)
    }


def name_changes(old, new, old_table, new_table) -> dict[str, list]:
    """Accepted taxa added, removed, renamed (the old name a synonym of the new one in the new
    taxa.csv) and regrouped (a grouping column of taxa.csv changed for a taxon in both)."""
    a, b = list(old_table["taxon"]), list(new_table["taxon"])
    sa, sb = set(a), set(b)
    syn = _synonyms(new)
    renamed = [{"old": t, "new": syn[t]} for t in a if t not in sb and syn.get(t) in sb]
    gone_by_rename = {r["old"] for r in renamed}
    came_by_rename = {r["new"] for r in renamed if r["new"] not in sa}
    cols = [
        c for c in old_table.columns if c in new_table.columns and c in _group_columns(old, new)
    ]
    regrouped = []
    if cols:
        ga, gb = old_table.set_index("taxon"), new_table.set_index("taxon")
        for t in b:
            if t not in sa:
                continue
            for c in cols:
                va, vb = _plain(ga.at[t, c]), _plain(gb.at[t, c])
                if va != vb:
                    regrouped.append({"taxon": t, "column": c, "old": va, "new": vb})
    return {
        "added": [t for t in b if t not in sa and t not in came_by_rename],
        "removed": [t for t in a if t not in sb and t not in gone_by_rename],
        "renamed": renamed,
        "regrouped": regrouped,
    }


def _group_columns(old, new) -> set[str]:
    from comparo.curation.harmonise import grouping_columns

    return set(grouping_columns(old)) | set(grouping_columns(new))


def tree_changes(old, new) -> dict[str, Any]:
    """Tips added and dropped, and whether the Newick text changed otherwise (lengths, shape)."""
    from comparo.phylo import tip_labels

    ta = list(tip_labels(old.tree)) if old.tree is not None else []
    tb = list(tip_labels(new.tree)) if new.tree is not None else []
    text = ["".join((ds.tree_text or "").split()) for ds in (old, new)]
    return {
        "tips_added": [t for t in tb if t not in set(ta)],
        "tips_dropped": [t for t in ta if t not in set(tb)],
        "text_changed": text[0] != text[1],
    }


# --------------------------------------------------------------------------- per-taxon values


def value_changes(old_table, new_table, renamed: dict[str, str], catalog=None) -> list[dict]:
    """Every per-taxon value (canonical unit) that moved: ``{"taxon", "quantity", "unit", "old",
    "new", "change_se"}``; ``change_se`` = (new - old) / sqrt(u_old^2 + u_new^2), None unless both
    values and both standard uncertainties are known (and not both zero)."""
    qa = [c for c in old_table.columns if f"{c}_obs" in old_table.columns]
    qb = [c for c in new_table.columns if f"{c}_obs" in new_table.columns]
    quantities = list(dict.fromkeys([*qa, *qb]))
    ta = old_table.set_index(old_table["taxon"].map(lambda t: renamed.get(t, t)))
    tb = new_table.set_index("taxon")
    # each .at below would deep-copy the tables' attrs (pandas __finalize__): per-taxon tables
    # carry large ones, which made this loop quadratic in practice; these copies need none
    ta.attrs, tb.attrs = {}, {}
    taxa = list(dict.fromkeys([*tb.index, *ta.index]))
    out = []
    for t in taxa:
        for q in quantities:
            vo = finite_or_none(ta.at[t, q]) if t in ta.index and q in ta else None
            vn = finite_or_none(tb.at[t, q]) if t in tb.index and q in tb else None
            if _same_number(vo, vn):
                continue
            uo = finite_or_none(ta.at[t, f"{q}_u"]) if vo is not None else None
            un = finite_or_none(tb.at[t, f"{q}_u"]) if vn is not None else None
            se = None
            if None not in (vo, vn, uo, un) and (uo > 0 or un > 0):
                se = (vn - vo) / math.hypot(uo, un)
            unit = catalog[q].unit if catalog is not None and q in catalog else None
            out.append(
                {"taxon": t, "quantity": q, "unit": unit, "old": vo, "new": vn, "change_se": se}
            )
    return out


# --------------------------------------------------------------------------- conclusions


def _analysis_name(a: dict) -> str:
    by = f"_by_{a['by']}" if a.get("by") else ""
    return f"{a.get('method', 'sma')}_{a['y']}_vs_{a['x']}{by}"


def _declared(ds) -> list[dict]:
    d = (ds.settings or {}).get("analysis") or []
    return [dict(a) for a in d if isinstance(a, dict)]


def _data(ds, table, seed: int):
    """The per-taxon table with the derived quantities (as the report fits), else the table."""
    from comparo.base.errors import ComparoError
    from comparo.derivation import derive
    from comparo.validation.settings import derive_settings

    try:
        return derive(table, derive_settings(ds.settings or {}), seed=seed)
    except (ComparoError, ValueError, KeyError):
        return table


def verdict(ci: tuple[float | None, float | None] | None, value: float) -> str | None:
    """Where the slope's interval lies against *value*: ``above``, ``below`` or ``includes``
    (None without an interval)."""
    if ci is None or ci[0] is None or ci[1] is None:
        return None
    if ci[0] > value:
        return "above"
    if ci[1] < value:
        return "below"
    return "includes"


def _implied_se(ci, level: float) -> float | None:
    """Standard error implied by a two-sided interval of *level*: width / (2 z_(1+level)/2)."""
    from statistics import NormalDist

    if ci is None or ci[0] is None or ci[1] is None:
        return None
    return (ci[1] - ci[0]) / (2 * NormalDist().inv_cdf((1 + level) / 2))


def _run_fit(ds, data, a: dict, seed: int) -> tuple[Any, str | None]:
    from comparo.base.errors import ComparoError
    from comparo.fitting import fit

    method = a.get("method", "sma")
    opts: dict[str, Any] = {}
    if method == "pgls":
        if ds.tree is None:
            return None, "method pgls needs a tree (tree.nwk)"
        from comparo.phylo import dataset_tree_labels, tip_labels

        labels = dataset_tree_labels(ds.taxa, tip_labels(ds.tree)) if ds.taxa is not None else None
        opts = {"tree": ds.tree, **({"tree_labels": labels} if labels else {})}
    if a["x"] not in data or a["y"] not in data:
        return None, f"no column {a['x'] if a['x'] not in data else a['y']!r} in this version"
    try:
        res = fit(
            data,
            a["x"],
            a["y"],
            method,
            by=a.get("by"),
            against=a.get("against", a.get("test_slope")),
            seed=seed,
            **opts,
        )
    except ComparoError as exc:
        return None, str(exc)
    return res, None


def analysis_changes(old, new, data_old, data_new, seed: int) -> list[dict]:
    """Every analysis declared in either comparo.toml (else the default set of
    :data:`comparo.validation.settings.DEFAULT_ANALYSES` whose columns exist), fitted on both
    versions."""
    from comparo.validation.settings import DEFAULT_ANALYSES

    todo = {_analysis_name(a): a for a in [*_declared(old), *_declared(new)]}
    if not todo:
        todo = {
            _analysis_name(a): dict(a)
            for a in DEFAULT_ANALYSES
            if (a["x"] in data_old and a["y"] in data_old)
            or (a["x"] in data_new and a["y"] in data_new)
        }
    out = []
    for name, a in todo.items():
        tested = a.get("against", a.get("test_slope"))
        tested = 0.0 if tested is None else float(tested)
        rec: dict[str, Any] = {
            "name": name,
            "x": a["x"],
            "y": a["y"],
            "method": a.get("method", "sma"),
            "tested_value": tested,
        }
        se = {}
        for side, ds, data in (("old", old, data_old), ("new", new, data_new)):
            res, err = _run_fit(ds, data, a, seed)
            ci = None if res is None else tuple(finite_or_none(v) for v in res.slope_ci)
            rec[f"slope_{side}"] = None if res is None else finite_or_none(res.slope)
            rec[f"ci_{side}"] = None if ci is None else list(ci)
            rec[f"n_{side}"] = None if res is None else int(res.n)
            rec[f"verdict_{side}"] = verdict(ci, tested) if res is not None else None
            rec[f"error_{side}"] = err
            se[side] = None if res is None else _implied_se(ci, res.ci_level)
        so, sn = rec["slope_old"], rec["slope_new"]
        rec["shift_se"] = None
        if None not in (so, sn, se["old"], se["new"]) and math.hypot(se["old"], se["new"]) > 0:
            rec["shift_se"] = (sn - so) / math.hypot(se["old"], se["new"])
        rec["verdict_changed"] = rec["verdict_old"] != rec["verdict_new"]
        rec["changed"] = (
            not _same_number(so, sn)
            or rec["ci_old"] != rec["ci_new"]
            or rec["n_old"] != rec["n_new"]
            or rec["verdict_changed"]
        )
        out.append(rec)
    return out


def regime_changes(data_old, data_new, renamed: dict[str, str]) -> list[dict]:
    """Taxa whose regime (kinetic, hydraulic, undetermined) differs between the versions."""

    def regimes(data, rename) -> dict[str, Any]:
        if "regime" not in data:
            return {}
        return {
            rename.get(t, t): (r if isinstance(r, str) and r else None)
            for t, r in zip(data["taxon"], data["regime"], strict=True)
        }

    a, b = regimes(data_old, renamed), regimes(data_new, {})
    return [
        {"taxon": t, "old": a.get(t), "new": b.get(t)}
        for t in dict.fromkeys([*b, *a])
        if a.get(t) != b.get(t)
    ]


# --------------------------------------------------------------------------- the result


@dataclass(frozen=True)
class VersionDiff(Result):
    """What changed between two versions of a compilation (:func:`diff`).

    Attributes mirror the JSON of ``comparo diff --format json`` (docs/versions.md): ``rows``,
    ``sources``, ``names``, ``tree``, ``settings_changed``, ``taxa`` (per-taxon values that
    moved, canonical units), ``analyses`` and ``regimes``.
    """

    old: str
    new: str
    rows: dict[str, list] = field(default_factory=dict)
    sources: dict[str, list] = field(default_factory=dict)
    names: dict[str, list] = field(default_factory=dict)
    tree: dict[str, Any] = field(default_factory=dict)
    settings_changed: bool = False
    taxa: tuple[dict, ...] = ()
    analyses: tuple[dict, ...] = ()
    regimes: tuple[dict, ...] = ()

    @property
    def differs(self) -> bool:
        """True when anything at all differs (``comparo diff`` exits 1)."""
        lists = [
            *self.rows.values(),
            *self.sources.values(),
            *self.names.values(),
            self.tree.get("tips_added", []),
            self.tree.get("tips_dropped", []),
            self.taxa,
            self.regimes,
        ]
        return (
            any(len(x) for x in lists)
            or bool(self.tree.get("text_changed"))
            or self.settings_changed
            or any(a["changed"] for a in self.analyses)
        )

    def to_dict(self) -> dict:
        """JSON-safe dict (the ``comparo diff --format json`` contract)."""
        return json_safe(
            {
                "old": self.old,
                "new": self.new,
                "differs": self.differs,
                "analyses": list(self.analyses),
                "regimes": list(self.regimes),
                "rows": self.rows,
                "sources": self.sources,
                "names": self.names,
                "tree": self.tree,
                "settings_changed": self.settings_changed,
                "taxa": list(self.taxa),
            }
        )

    def to_frame(self):
        """Every difference as one long table: section, item, column, old, new, note."""
        import pandas as pd

        return pd.DataFrame(
            self._records(), columns=["section", "item", "column", "old", "new", "note"]
        )

    def _records(self) -> list[dict]:
        recs: list[dict] = []

        def add(section, item, column=None, old=None, new=None, note=None):
            recs.append(
                {
                    "section": section,
                    "item": item,
                    "column": column,
                    "old": old,
                    "new": new,
                    "note": note,
                }
            )

        for a in self.analyses:
            if a["changed"]:
                note = f"shift {a['shift_se']:.2f} SE" if a["shift_se"] is not None else ""
                if a["verdict_changed"]:
                    note += (
                        f"; verdict against {a['tested_value']:g}: "
                        f"{a['verdict_old']} -> {a['verdict_new']}"
                    )
                add(
                    "analysis", a["name"], "slope", a["slope_old"], a["slope_new"], note.strip("; ")
                )
        for r in self.regimes:
            add("regime", r["taxon"], "regime", r["old"], r["new"])
        for x in self.rows.get("removed", []):
            add("rows", x, note="removed")
        for x in self.rows.get("added", []):
            add("rows", x, note="added")
        for c in self.rows.get("changed", []):
            add("rows", c["obs_id"], c["column"], c["old"], c["new"], c["kind"])
        for key in ("removed", "added"):
            for x in self.sources.get(key, []):
                add("sources", x, note=key)
        for c in self.sources.get("changed", []):
            add("sources", c["source_id"], c["column"], c["old"], c["new"], "changed")
        for key in ("removed", "added"):
            for x in self.names.get(key, []):
                add("taxa", x, note=key)
        for r in self.names.get("renamed", []):
            add("taxa", r["new"], "name", r["old"], r["new"], "renamed")
        for r in self.names.get("regrouped", []):
            add("taxa", r["taxon"], r["column"], r["old"], r["new"], "regrouped")
        for t in self.tree.get("tips_dropped", []):
            add("tree", t, note="tip dropped")
        for t in self.tree.get("tips_added", []):
            add("tree", t, note="tip added")
        if self.tree.get("text_changed") and not (
            self.tree.get("tips_added") or self.tree.get("tips_dropped")
        ):
            add("tree", "", note="same tips, shape or branch lengths changed")
        if self.settings_changed:
            add("settings", "comparo.toml", note="changed")
        for v in self.taxa:
            se = "" if v["change_se"] is None else f"{v['change_se']:+.2f} SE"
            add(
                "values",
                v["taxon"],
                v["quantity"],
                v["old"],
                v["new"],
                f"{v['unit'] or ''} {se}".strip(),
            )
        return recs

    def summary(self) -> str:
        """The differences for people: conclusions first, then counts, then every list."""
        from comparo.base.display import cell

        if not self.differs:
            return f"no differences between {self.old} and {self.new}"
        lines = [f"{self.old} -> {self.new}", "", "Conclusions"]
        moved = [a for a in self.analyses if a["changed"]]
        if not self.analyses:
            lines.append("  no analysis could be fitted in either version")
        for a in self.analyses:
            if not a["changed"]:
                lines.append(f"  {a['name']}: unchanged (slope {cell(a['slope_new'])})")
                continue
            shift = "" if a["shift_se"] is None else f", shift {a['shift_se']:+.2f} SE"
            ci = lambda c: "–" if c is None else f"[{cell(c[0])}, {cell(c[1])}]"  # noqa: E731
            lines.append(
                f"  {a['name']}: slope {cell(a['slope_old'])} {ci(a['ci_old'])} -> "
                f"{cell(a['slope_new'])} {ci(a['ci_new'])}{shift}"
            )
            verdict_text = f"{a['verdict_old'] or 'no fit'} -> {a['verdict_new'] or 'no fit'}"
            lines.append(
                f"    against {a['tested_value']:g}: {verdict_text}"
                + ("  (VERDICT CHANGED)" if a["verdict_changed"] else "")
            )
            for side in ("old", "new"):
                if a[f"error_{side}"]:
                    lines.append(f"    {side}: not fitted: {a[f'error_{side}']}")
        if self.regimes:
            lines.append(f"  regimes changed: {len(self.regimes)}")
            lines += [
                f"    {r['taxon']}: {r['old'] or '–'} -> {r['new'] or '–'}" for r in self.regimes
            ]
        r = self.rows
        unit_only = {c["obs_id"] for c in r.get("changed", []) if c["kind"] == "unit_only"}
        changed = {c["obs_id"] for c in r.get("changed", []) if c["kind"] != "unit_only"}
        lines += [
            "",
            "Counts",
            f"  rows: {len(r.get('added', []))} added, {len(r.get('removed', []))} removed, "
            f"{len(changed)} changed, {len(unit_only - changed)} with only a unit or form change",
            f"  sources: {len(self.sources.get('added', []))} added, "
            f"{len(self.sources.get('removed', []))} "
            f"removed, {len({c['source_id'] for c in self.sources.get('changed', [])})} changed",
            f"  taxa: {len(self.names.get('added', []))} added, "
            f"{len(self.names.get('removed', []))} removed, "
            f"{len(self.names.get('renamed', []))} renamed, "
            f"{len({g['taxon'] for g in self.names.get('regrouped', [])})} regrouped",
            f"  tree: {len(self.tree.get('tips_added', []))} tips added, "
            f"{len(self.tree.get('tips_dropped', []))} dropped",
            f"  per-taxon values moved: {len(self.taxa)}; analyses changed: {len(moved)} of "
            f"{len(self.analyses)}",
            "",
            "Details",
        ]
        for rec in self._records():
            if rec["section"] in ("analysis", "regime"):
                continue
            col = f" {rec['column']}" if rec["column"] else ""
            change = f": {cell(rec['old'])} -> {cell(rec['new'])}" if rec["column"] else ""
            note = f" ({rec['note']})" if rec["note"] else ""
            lines.append(f"  {rec['section']} {rec['item']}{col}{change}{note}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        recs = self._records()
        title = f"comparo diff: {self.old} -> {self.new}"
        if not recs:
            return html_table(title, ["result"], [["no differences"]])
        header = ["section", "item", "column", "old", "new", "note"]
        return html_table(title, header, [[r[h] for h in header] for r in recs])

    def to_html_page(self) -> str:
        """A self-contained HTML page of the differences (``comparo diff --format html``)."""
        import html

        body = self._repr_html_()
        summary = html.escape(self.summary().split("\n\nDetails")[0])
        return (
            "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>comparo diff</title>"
            "<style>body{font-family:system-ui,sans-serif;margin:2em;color:#222;max-width:70em}"
            "table{border-collapse:collapse;font-size:0.9em}"
            "td,th{border:1px solid #ccd;padding:2px 8px;text-align:left}"
            "th{background:#eef2f7}pre{background:#f7f7f4;padding:1em}</style></head>"
            f"<body><h1>What changed</h1><pre>{summary}</pre>{body}</body></html>\n"
        )


def diff(
    old: str | Path | Any, new: str | Path | Any, *, temperature: bool = True, seed: int = 20240601
) -> VersionDiff:
    """Compare two versions of a compilation (dataset folders, workbooks or loaded datasets).

    Per-taxon values are compared in each quantity's canonical unit (temperature-normalised
    unless ``temperature=False``); the analyses are fitted on both versions with the same
    *seed*. Raises :class:`comparo.InputError` when a version does not load.
    """
    from comparo.curation.aggregation import per_taxon

    a, b = _load(old), _load(new)
    ta, tb = per_taxon(a, temperature=temperature), per_taxon(b, temperature=temperature)
    names = name_changes(a, b, ta, tb)
    # values follow a rename one to one; a lump (into a taxon of OLD, or two names into one)
    # is compared under the names as they are
    targets = [r["new"] for r in names["renamed"]]
    renamed = {
        r["old"]: r["new"]
        for r in names["renamed"]
        if r["new"] not in set(ta["taxon"]) and targets.count(r["new"]) == 1
    }
    da, db = _data(a, ta, seed), _data(b, tb, seed)
    return VersionDiff(
        old=_label(old),
        new=_label(new),
        rows=row_changes(a, b),
        sources=source_changes(a, b),
        names=names,
        tree=tree_changes(a, b),
        settings_changed=(a.settings or {}) != (b.settings or {}),
        taxa=tuple(value_changes(ta, tb, renamed, b.catalog)),
        analyses=tuple(analysis_changes(a, b, da, db, seed)),
        regimes=tuple(regime_changes(da, db, renamed)),
    )
