"""The provenance appendix: every plotted value, grouped by source, from as reported to as used."""

from __future__ import annotations

import comparo.report.fmt as fmt


def appendix(points, ds, h) -> list[dict]:
    """Per source (first seen first): its citation once, and one row per plotted observation.

    Each row: taxon, quantity, as reported (value and unit), measurement temperature (°C),
    temperature factor with its rule, the value used (canonical unit, at the reference
    temperature), the taxon value plotted, obs_id, basis and locator.
    """
    if points is None or not len(points):
        return []
    rows = h.rows.set_index("obs_id")
    src = ds.sources.set_index("source_id")
    seen: set[tuple[str, str]] = set()
    groups: dict[str, dict] = {}
    for p in points.itertuples(index=False):
        for val, ids in ((p.x_value, p.x_obs), (p.y_value, p.y_obs)):
            for oid in [s for s in str(ids).split(";") if s]:
                if (p.label, oid) in seen or oid not in rows.index:
                    continue
                seen.add((p.label, oid))
                o = rows.loc[oid]
                sid = o["source_id"]
                g = groups.get(sid)
                if g is None:
                    s = src.loc[sid] if sid in src.index else None
                    doi = s.get("doi") if s is not None else None
                    g = groups[sid] = {
                        "source_id": sid,
                        "citation": s["citation"] if s is not None else "(source missing)",
                        "doi": doi if isinstance(doi, str) and doi else "",
                        "rows": [],
                    }
                g["rows"].append(_row(p.label, o, val, oid))
    out = list(groups.values())
    for g in out:
        g["rows"].sort(key=lambda r: (r["taxon"], r["quantity"]))
        g["n"] = len(g["rows"])
    return out


def _row(label: str, o, taxon_value, oid: str) -> dict:
    t = o["temperature_c"]
    factor = float(o["temperature_factor"])
    q10, ea = o.get("q10_used"), o.get("ea_kj_mol_used")
    if q10 == q10 and q10 is not None:
        rule = f"×{fmt.num(factor)} (Q10 {q10:g})"
    elif ea == ea and ea is not None:
        rule = f"×{fmt.num(factor)} (Arrhenius, {ea:g} kJ/mol)"
    elif str(o["temperature_note"]).startswith("no temperature"):
        rule = "none: no temperature given"
    elif str(o["temperature_note"]).startswith("kept as measured"):
        rule = "none: in vivo at body temperature, kept as measured"
    else:
        rule = ""
    return {
        "taxon": label,
        "quantity": o["quantity_key"],
        "reported": f"{float(o['value']):.15g} {o['unit']}",
        "temperature": None if t != t else float(t),
        "factor": rule,
        "used": float(o["value_h"]),
        "unit": fmt.pretty_unit(o["unit_canonical"]),
        "taxon_value": taxon_value,
        "obs_id": oid,
        "basis": o["basis_effective"],
        "locator": o["locator"],
    }
