"""Harmonise a validated dataset and aggregate it to one row per taxon.

Steps, each a pure function over the observation frame of a
:class:`~comparo.validation.tables.Dataset`:

1. names: reported names -> accepted names (taxa.csv), the mapping recorded;
2. temperature: temperature-sensitive values -> the reference temperature
   (Q10, or Arrhenius where an activation energy is given), factor recorded;
3. standard uncertainty: sd/se/ci95/range_half -> a standard uncertainty of
   the reported value (GUM, JCGM 100:2008);
4. diagnostics: duplicates (merged), suspected unit slips, conflicts;
5. :func:`per_taxon`: one row per accepted taxon with value, uncertainty,
   count, sources, weakest basis and obs ids per quantity.

Every row ends as ``used``, ``merged`` (a duplicate of another row) or
``excluded`` (with a reason): see :func:`harmonise`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from comparo.base.errors import Problem, problems_frame, problems_from_frame
from comparo.validation.tables import BASIS_ORDER, WORKING_RANGE, CheckResult, Dataset, map_distinct

R_GAS = 8.314462618  # J mol^-1 K^-1 (CODATA 2018, exact)
SLIP_POWERS = (3, 6, 1)  # orders of magnitude a unit slip typically shifts a value by
DEFAULT_CONFLICT_FACTOR = (
    1.5  # common practice: values of one taxon differing by > 50% with no uncertainty given
)
CONFLICT_COVERAGE = 2.0  # common practice: |a - b| > 2 u_c (about 95% for normal errors)


# --------------------------------------------------------------------------- names


def accepted_names(ds: Dataset) -> pd.Series:
    """Accepted name per observation row (taxa.csv ``accepted_name`` where given)."""
    taxon = ds.observations["taxon"]
    if ds.taxa is None or "accepted_name" not in ds.taxa or "taxon" not in ds.taxa:
        return taxon.copy()
    mapping = {t: a for t, a in zip(ds.taxa["taxon"], ds.taxa["accepted_name"], strict=True) if a}
    return map_distinct(taxon, lambda t: mapping.get(t, t))


def grouping_columns(ds: Dataset) -> list[str]:
    """Columns of taxa.csv that group taxa (everything except the name columns)."""
    if ds.taxa is None or "taxon" not in ds.taxa:  # without names, nothing can be grouped
        return []
    return [c for c in ds.taxa.columns if c not in ("taxon", "accepted_name", "tree_label")]


def taxon_groups(ds: Dataset) -> pd.DataFrame:
    """Grouping columns per accepted name (the accepted name's own row wins)."""
    cols = grouping_columns(ds)
    if not cols:
        return pd.DataFrame(columns=["taxon"])
    t = ds.taxa.copy()
    t["accepted"] = [
        a or n for n, a in zip(t["taxon"], t.get("accepted_name", t["taxon"]), strict=True)
    ]
    t["own"] = t["taxon"] == t["accepted"]
    t = t.sort_values("own", ascending=False, kind="stable").drop_duplicates("accepted")
    return t[["accepted", *cols]].rename(columns={"accepted": "taxon"})


# --------------------------------------------------------------------------- uncertainty


def standard_uncertainty(u: pd.Series, kind: pd.Series, n: pd.Series) -> pd.Series:
    """Standard uncertainty of a reported value from its spread.

    ``se``: as is. ``sd``: sd/sqrt(n) when n is known (the value is a mean of n),
    else sd. ``ci95``: half-width / t(0.975, n-1), or / 1.96 when n is unknown.
    ``range_half``: a/sqrt(3), the rectangular distribution (GUM 4.3.7). An
    uncertainty without a kind is taken as a standard deviation.
    """
    u = u.astype(float)
    n = n.astype(float)
    kind = kind.fillna("").replace("", "sd")
    out = pd.Series(np.nan, index=u.index)
    has_n = n.notna() & (n >= 1)
    sd = kind == "sd"
    out[sd] = np.where(has_n[sd], u[sd] / np.sqrt(n[sd].where(has_n[sd], 1.0)), u[sd])
    out[kind == "se"] = u[kind == "se"]
    ci = kind == "ci95"
    dof = (n[ci] - 1).where(n[ci] >= 2)
    tq = pd.Series(1.959963984540054, index=dof.index, dtype=float)
    if dof.notna().any():  # a t quantile per distinct sample size
        from comparo.base.quantiles import t_quantile

        tq[dof.notna()] = map_distinct(
            dof[dof.notna()].astype(float), lambda d: t_quantile(d, 0.975)
        )
    out[ci] = u[ci] / tq
    rh = kind == "range_half"
    out[rh] = u[rh] / math.sqrt(3.0)
    return out


# --------------------------------------------------------------------------- temperature


def temperature_factor(
    t_meas: np.ndarray, t_ref: float, q10: np.ndarray, ea_kj: np.ndarray, is_time: np.ndarray
) -> np.ndarray:
    """Factor that brings a rate measured at ``t_meas`` °C to ``t_ref`` °C.

    Q10: R(T_ref) = R(T)·Q10^((T_ref − T)/10). Arrhenius (where an activation
    energy Ea in kJ/mol is given): R(T_ref)/R(T) = exp(−Ea/R·(1/T_ref − 1/T)),
    T in kelvin. A time (kinetic_time) gets the reciprocal factor.
    NaN where the temperature is unknown.
    """
    with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
        arr = np.exp(-(ea_kj * 1e3) / R_GAS * (1.0 / (t_ref + 273.15) - 1.0 / (t_meas + 273.15)))
        fac = np.where(np.isfinite(ea_kj), arr, q10 ** ((t_ref - t_meas) / 10.0))
        return np.where(is_time, 1.0 / fac, fac)


def q10_from_activation_energy(ea_kj_mol: float, t1_c: float, t2_c: float) -> float:
    """Q10 implied by an Arrhenius activation energy over [t1, t2] °C:
    Q10 = (k2/k1)^(10/(T2−T1)) with k = A exp(−Ea/(R T))."""
    k = math.exp(-(ea_kj_mol * 1e3) / R_GAS * (1 / (t2_c + 273.15) - 1 / (t1_c + 273.15)))
    return k ** (10.0 / (t2_c - t1_c))


# --------------------------------------------------------------------------- harmonise


@dataclass
class Harmonised:
    """The observation rows after harmonisation, with their fate.

    Attributes
    ----------
    rows : pandas.DataFrame
        One row per observation read, with ``accepted`` (accepted name),
        ``value_h`` / ``u_h`` (value and standard uncertainty in the canonical
        unit, at the reference temperature where normalised),
        ``temperature_factor``, ``temperature_note``, ``q10_used`` (the Q10 applied,
        dimensionless; NaN where none was), ``ea_kj_mol_used`` (the Arrhenius activation
        energy applied, kJ/mol; NaN where none was), ``status``
        (``used``/``merged``/``excluded``), ``merged_into`` and ``reason``.
    conflicts, unit_slips : list of dict
    reference_temperature_c : float or None
        The reference temperature in °C (with ``"operating"``, the fallback for taxa
        without an operating temperature); None when temperature normalisation is off.
    policy : comparo.validation.temperature.TemperaturePolicy or None
        The temperature settings applied; None when normalisation is off.
    """

    rows: pd.DataFrame
    conflicts: list[dict[str, Any]] = field(default_factory=list)
    unit_slips: list[dict[str, Any]] = field(default_factory=list)
    reference_temperature_c: float | None = None
    policy: Any = None


def _numbers_only(table: Any) -> dict[str, float]:
    """The numeric entries of a settings table (anything else is an error in check)."""
    if not isinstance(table, dict):
        return {}
    return {
        k: float(v)
        for k, v in table.items()
        if isinstance(v, int | float) and not isinstance(v, bool)
    }


def _thermal_columns(
    ds: Dataset, accepted: pd.Series, with_groups: bool = False
) -> tuple[np.ndarray, np.ndarray, list[dict[str, str]]]:
    """Per observation row: the taxon's thermoregulation (text, '' when not given), its
    operating temperature (°C, NaN when not given) and (*with_groups*) its taxa.csv
    grouping values."""
    groups = taxon_groups(ds)
    if "taxon" not in groups or len(groups.columns) == 1:
        n = len(accepted)
        return np.full(n, "", dtype=object), np.full(n, np.nan), [{}] * n if with_groups else []
    g = groups.set_index("taxon")
    thermo = (
        accepted.map(g["thermoregulation"]).fillna("").to_numpy(object)
        if "thermoregulation" in g
        else np.full(len(accepted), "", dtype=object)
    )
    t_op = (
        pd.to_numeric(accepted.map(g["operating_temperature_c"]), errors="coerce").to_numpy(float)
        if "operating_temperature_c" in g
        else np.full(len(accepted), np.nan)
    )
    if not with_groups:
        return thermo, t_op, []
    rec = {
        t: {c: ("" if pd.isna(v) else str(v)) for c, v in row.items()} for t, row in g.iterrows()
    }
    return thermo, t_op, [rec.get(a, {}) for a in accepted]


def _rule_q10(policy, keys: pd.Series, groups: list[dict[str, str]]) -> np.ndarray:
    """The Q10 of the last ``[[temperature.rule]]`` matching each row (NaN where none does)."""
    out = np.full(len(keys), np.nan)
    if not policy.rules:
        return out
    cache: dict[tuple, float] = {}
    for i, (k, g) in enumerate(zip(keys, groups, strict=True)):
        sig = (k, tuple(sorted(g.items())))
        if sig not in cache:
            cache[sig] = next((r.q10 for r in reversed(policy.rules) if r.matches(k, g)), np.nan)
        out[i] = cache[sig]
    return out


def _temperature_columns(
    ds: Dataset, obs: pd.DataFrame, temperature: bool
) -> tuple[Any, dict[str, np.ndarray]]:
    """The temperature policy of *ds* and the columns it adds to the observation rows
    (``temperature_factor``, ``temperature_note``, ``temperature_rule``, ``value_temp_c``,
    ``q10_used``, ``ea_kj_mol_used``); see :func:`harmonise`."""
    from comparo.validation.temperature import (
        RULE_ARRHENIUS,
        RULE_KEPT,
        RULE_NONE,
        RULE_Q10,
        temperature_policy,
    )

    cat, n = ds.catalog, len(obs)
    keys = obs["quantity_key"]

    def per_key(fn) -> np.ndarray:
        known = map_distinct(keys, lambda k: bool(k) and k in cat and fn(cat[k]))
        return known.to_numpy(dtype=bool)

    ts = per_key(lambda q: q.temperature_sensitive)
    is_time = per_key(lambda q: q.is_time)
    is_freq = per_key(lambda q: q.kind == "frequency")
    settings = ds.settings
    policy = temperature_policy(settings)
    q10_set = _numbers_only(settings.get("q10", {}))
    ea_set = _numbers_only(settings.get("activation_energy_kj_mol", {}))
    thermo, t_op, groups = _thermal_columns(ds, obs["accepted"], with_groups=bool(policy.rules))
    q10 = map_distinct(
        keys, lambda k: float(q10_set.get(k, cat[k].q10 or np.nan)) if k in cat else np.nan
    ).to_numpy(dtype=float)
    ea = map_distinct(keys, lambda k: float(ea_set.get(k, np.nan))).to_numpy(dtype=float)
    row_q10 = obs["q10"].to_numpy(dtype=float)
    specific = np.where(np.isfinite(row_q10), row_q10, _rule_q10(policy, keys, groups))
    q10 = np.where(np.isfinite(specific), specific, q10)
    ea = np.where(np.isfinite(specific), np.nan, ea)  # a row's own or a rule's Q10 wins over an Ea
    t_meas = obs["temperature_c"].to_numpy(dtype=float)
    t_ref = policy.reference_c
    t_target = np.where(np.isfinite(t_op), t_op, t_ref) if policy.operating else np.full(n, t_ref)
    prep = np.full(n, "", dtype=object)
    if "preparation" in obs:
        prep = obs["preparation"].fillna("").astype(str).to_numpy(object)
    in_vivo = (prep == "in_vivo") | ((prep == "") & is_freq)
    with np.errstate(invalid="ignore"):
        at_op = np.isfinite(t_op) & (np.abs(t_meas - t_op) <= policy.heterotherm_tolerance_c)
    regulated = in_vivo & ((thermo == "endotherm") | ((thermo == "heterotherm") & at_op))
    keep = ts & np.isfinite(t_meas) & regulated & (policy.regulated_in_vivo == "as_measured")
    factor = np.ones(n)
    note = np.full(n, "", dtype=object)
    rule = np.full(n, "", dtype=object)
    value_temp = np.where(ts, t_meas, np.nan)
    known = ts & np.isfinite(t_meas) & ~keep
    if temperature:
        factor = np.where(known, temperature_factor(t_meas, t_target, q10, ea, is_time), 1.0)
        where = np.full(n, "", dtype=object)
        if policy.operating:
            where = np.where(
                np.isfinite(t_op),
                ", operating temperature",
                ", no operating_temperature_c: fallback",
            )
        note[known] = [
            f"x{fa:.4g} ({'Arrhenius' if np.isfinite(e) else f'Q10 {q:g}'}, {t:g} -> {tt:g} °C{w})"
            for fa, q, e, t, tt, w in zip(
                factor[known],
                q10[known],
                ea[known],
                t_meas[known],
                t_target[known],
                where[known],
                strict=True,
            )
        ]
        rule[known] = np.where(np.isfinite(ea[known]), RULE_ARRHENIUS, RULE_Q10)
        note[keep] = [
            f"kept as measured at {t:g} °C ({th}, in vivo"
            + ("" if p else ", no preparation: a frequency counts as in vivo")
            + ")"
            for t, th, p in zip(t_meas[keep], thermo[keep], prep[keep], strict=True)
        ]
        rule[keep] = RULE_KEPT
        value_temp = np.where(known, t_target, value_temp)
        none = ts & ~np.isfinite(t_meas)
        note[none] = "no temperature: used un-normalised"
        rule[none] = RULE_NONE
    applied = known if temperature else np.zeros(n, dtype=bool)
    return policy, {
        "temperature_factor": factor,
        "temperature_note": note,
        "temperature_rule": rule,
        "value_temp_c": value_temp,
        "q10_used": np.where(applied & ~np.isfinite(ea), q10, np.nan),
        "ea_kj_mol_used": np.where(applied & np.isfinite(ea), ea, np.nan),
    }


def harmonise(
    ds: Dataset, *, temperature: bool = True, exclude_unit_slips: bool = True
) -> Harmonised:
    """Names, temperature, uncertainty, duplicates, slips and conflicts (see module doc).

    Temperature (docs/methods/temperature.md): a temperature-sensitive value with a
    measurement temperature is brought to the target temperature (the reference, or with
    ``reference_temperature_c = "operating"`` the taxon's ``operating_temperature_c``,
    else the fallback) by its Q10 (per-row ``q10`` > the last matching
    ``[[temperature.rule]]`` > ``[q10]`` > catalogue) or an activation energy; an in-vivo
    value of an endotherm, or of a heterotherm measured within the tolerance of its
    operating temperature, is kept as measured (unless ``regulated_in_vivo =
    "normalise"``). A value without a preparation counts as in vivo when its quantity is
    a frequency (what the animal does), as a preparation's otherwise. Rows gain
    ``temperature_rule`` and ``value_temp_c`` (°C the harmonised value refers to).
    """
    obs = ds.observations.copy()
    obs["accepted"] = accepted_names(ds)
    obs["u_h"] = standard_uncertainty(
        obs["uncertainty_canonical"], obs["uncertainty_kind"], obs["n"]
    ).to_numpy()
    keys = obs["quantity_key"]
    policy, columns = _temperature_columns(ds, obs, temperature)
    for name, col in columns.items():
        obs[name] = col
    factor = columns["temperature_factor"]
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        obs["value_h"] = obs["value_canonical"].to_numpy(dtype=float) * factor
        obs["u_h"] = obs["u_h"].to_numpy(dtype=float) * factor

    status = np.where(obs["problem"] != "", "excluded", "used").astype(object)
    reason = obs["problem"].to_numpy(dtype=object).copy()
    for bad, why in _beyond_range(obs):
        take = bad & (status == "used")
        status[take] = "excluded"
        reason[take] = why
    merged_into = np.full(len(obs), "", dtype=object)

    # duplicates: same source, locator, taxon, quantity and value (to 6 significant digits)
    v6 = map_distinct(obs["value_canonical"], lambda v: f"{v:.6g}" if np.isfinite(v) else "")
    dkey = (
        obs["source_id"]
        + "\x1f"
        + obs["locator"].str.lower().str.replace(r"\s+", "", regex=True)
        + "\x1f"
        + obs["accepted"]
        + "\x1f"
        + keys
        + "\x1f"
        + v6
    )
    live = np.flatnonzero(status == "used")
    lk = dkey.iloc[live]
    dup = lk.duplicated(keep="first").to_numpy()
    if dup.any():
        first_id = (
            obs["obs_id"]
            .iloc[live]
            .groupby(lk.to_numpy(), sort=False)
            .transform("first")
            .to_numpy(object)
        )
        d = live[dup]
        status[d] = "merged"
        merged_into[d] = first_id[dup]
        reason[d] = [
            f"duplicate of {m} (same source, locator, taxon, quantity, value)"
            for m in first_id[dup]
        ]
    obs["status"], obs["reason"], obs["merged_into"] = status, reason, merged_into

    h = Harmonised(
        obs,
        reference_temperature_c=policy.reference_c if temperature else None,
        policy=policy if temperature else None,
    )
    h.unit_slips = find_unit_slips(obs, ds)
    if exclude_unit_slips:
        slip_ids = {s["obs_id"]: s for s in h.unit_slips}
        m = obs["obs_id"].isin(list(slip_ids)) & (obs["status"] == "used")
        obs.loc[m, "status"] = "excluded"
        obs.loc[m, "reason"] = [
            f"suspected unit slip: off the group median by ~10^{slip_ids[o]['power']}; likely unit {slip_ids[o]['likely_unit']}"
            for o in obs.loc[m, "obs_id"]
        ]
    if (
        ds.traces is not None
    ):  # per-trace cycle results join as computed rows (comparo.traces.files), using
        from comparo.traces.files import trace_observations  # only the taxon values still in use

        obs = trace_observations(ds, obs)
        h.rows = obs
    h.conflicts = find_conflicts(obs, ds)
    return h


def _beyond_range(obs: pd.DataFrame) -> list[tuple[np.ndarray, str]]:
    """Rows whose harmonised value or uncertainty left the range of a double or
    :data:`~comparo.validation.tables.WORKING_RANGE` (an extreme temperature factor), with the reason."""
    lo, hi = WORKING_RANGE
    vc = obs["value_canonical"].to_numpy(dtype=float)
    out = []
    for col, name in (("value_h", "value"), ("u_h", "uncertainty")):
        h = obs[col].to_numpy(dtype=float)
        src = vc if col == "value_h" else obs["uncertainty_canonical"].to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            bad = (
                np.isfinite(src)
                & (src != 0)
                & (~np.isfinite(h) | (np.abs(h) < lo) | (np.abs(h) > hi))
            )
        out.append(
            (
                bad,
                f"temperature normalisation takes the {name} outside the range comparo computes with ({lo:g} to {hi:g} in the canonical unit): check temperature_c and the Q10",
            )
        )
    return out


_SLIP_UNITS = {
    "length": ["nm", "um", "mm", "cm", "m"],
    "mass": ["ug", "mg", "g", "kg"],
    "stress": ["Pa", "kPa", "MPa", "GPa"],
    "time": ["us", "ms", "s"],
    "rate": ["1/s", "1/ms"],
    "frequency": ["Hz", "kHz"],
    "area": ["nm**2", "um**2", "mm**2", "m**2"],
    "viscosity": ["uPa*s", "mPa*s", "Pa*s"],
}


def find_unit_slips(obs: pd.DataFrame, ds: Dataset) -> list[dict[str, Any]]:
    """Values off their group's median by close to a power of ten typical of a unit slip.

    For each quantity, the log10 distance d of a value from the median of its
    group (taxa.csv's first grouping column when that group has at least 5
    values of the quantity, else all taxa) is compared with 10^3 and 10^6
    (|d| within 0.5 decade of 3 or 6, and more than 4 robust spreads from the
    median). A shift of 10^1 is flagged only when the value is also outside the
    catalogue's plausible range: size-dependent quantities legitimately vary
    tenfold across taxa. The likely unit is the one that removes the shift.
    """
    from comparo.base import units

    cat = ds.catalog
    gcols = grouping_columns(ds)
    df = obs[(obs["status"] == "used") & np.isfinite(obs["value_h"]) & (obs["value_h"] > 0)].copy()
    if df.empty:
        return []
    df["_lv"] = np.log10(df["value_h"].to_numpy(float))
    from comparo.validation.temperature import TAXA_TEMPERATURE_COLUMNS

    gcols = [c for c in gcols if c not in TAXA_TEMPERATURE_COLUMNS]  # not groups of relatives
    if gcols:
        g = taxon_groups(ds).set_index("taxon")[gcols[0]]
        df["_g"] = df["accepted"].map(g).fillna("")
    else:
        df["_g"] = ""

    def centre(keys):
        grp = df.groupby(keys, sort=False)["_lv"]
        med = grp.transform("median")
        mad = 1.4826 * (df["_lv"] - med).abs().groupby([df[k] for k in keys], sort=False).transform(
            "median"
        )
        return med, mad, grp.transform("size")

    med_all, mad_all, n_all = centre(["quantity_key"])
    med_g, mad_g, n_g = centre(["quantity_key", "_g"])
    use_g = n_g >= 5
    med = med_g.where(use_g, med_all)
    spread = mad_g.where(use_g, mad_all)
    n = n_g.where(use_g, n_all)
    d = df["_lv"] - med
    lo = map_distinct(
        df["quantity_key"], lambda k: cat[k].range[0] if cat[k].range else 0.0
    ).astype(float)
    hi = map_distinct(
        df["quantity_key"], lambda k: cat[k].range[1] if cat[k].range else np.inf
    ).astype(float)
    outside = (df["value_h"] < lo) | (df["value_h"] > hi)
    out = []
    cand = (n >= 5) & (d.abs() > 0.85) & (d.abs() > 4 * np.maximum(spread, 0.05))
    for i in np.flatnonzero(cand.to_numpy()):
        r = df.iloc[i]
        di = float(d.iat[i])
        for p in SLIP_POWERS:
            ok = (
                abs(abs(di) - p) < 0.5
                if p >= 3
                else (abs(abs(di) - p) < 0.15 and bool(outside.iat[i]))
            )
            if ok:
                power = -p if di < 0 else p
                likely = _likely_unit(r["unit"], cat[r["quantity_key"]].kind, -power, units)
                out.append(
                    {
                        "obs_id": r["obs_id"],
                        "row": int(r["row"]),
                        "taxon": r["accepted"],
                        "quantity": r["quantity_key"],
                        "value": float(r["value"]),
                        "unit": r["unit"],
                        "power": power,
                        "likely_unit": likely or f"{r['unit']} x 10^{-power}",
                        "group_median": float(10 ** med.iat[i]),
                    }
                )
                break
    return out


def _likely_unit(unit: str, kind: str, power: int, units) -> str | None:
    """Unit u' with value[u'] = value[unit] x 10^power, i.e. conversion u' -> unit = 10^power."""
    for cand in _SLIP_UNITS.get(kind, []):
        try:
            f = units.conversion_factor(cand, unit)
        except Exception:
            continue
        if f > 0 and abs(math.log10(f) - power) < 1e-6:
            return cand
    return None


def _pair_bad(
    vi: np.ndarray, vj: np.ndarray, ui: np.ndarray, uj: np.ndarray, factor: float
) -> np.ndarray:
    """The conflict rule for pairs of values (see :func:`find_conflicts`)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        with_u = np.isfinite(ui) & np.isfinite(uj) & ((ui > 0) | (uj > 0))
        by_u = np.abs(vi - vj) > CONFLICT_COVERAGE * np.hypot(ui, uj)
        lo, hi = np.minimum(vi, vj), np.maximum(vi, vj)
        by_ratio = (lo > 0) & (hi / np.where(lo > 0, lo, 1.0) > factor)
    return np.where(with_u, by_u, by_ratio)


_PAIR_BLOCK = 2_000_000  # pairs compared at once (memory bound of the vectorised pair test)


def find_conflicts(
    obs: pd.DataFrame, ds: Dataset, factor: float | None = None
) -> list[dict[str, Any]]:
    """Pairs of values of one taxon and quantity (from different rows) that disagree.

    With both uncertainties known: |a − b| > 2·sqrt(u_a² + u_b²) (common
    practice). Otherwise: max/min > ``conflict_factor`` (settings, default 1.5).
    One entry per (taxon, quantity) listing every row and source involved, in
    the order the (taxon, quantity) first appears; rows in table order.
    Every pair within a group is compared (vectorised, in blocks).
    """
    given = ds.settings.get("conflict_factor", DEFAULT_CONFLICT_FACTOR)
    ok = (
        isinstance(given, int | float)
        and not isinstance(given, bool)
        and math.isfinite(given)
        and given > 1
    )
    factor = float(
        factor or (given if ok else DEFAULT_CONFLICT_FACTOR)
    )  # a bad setting is an error in check
    df = obs[(obs["status"] == "used") & np.isfinite(obs["value_h"])]
    if len(df) < 2:
        return []
    gid = df.groupby(["accepted", "quantity_key"], sort=False).ngroup().to_numpy()
    order = np.argsort(gid, kind="stable")  # grouped, table order within a group
    g = gid[order]
    v = df["value_h"].to_numpy(float)[order]
    u = df["u_h"].to_numpy(float)[order]
    sizes = np.bincount(g)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    pos = np.arange(len(g)) - starts[g]
    k = sizes[g]
    involved = np.zeros(len(g), dtype=bool)
    small = k <= 2000
    # small groups: every pair (i, j > i) enumerated at once, in blocks of rows
    idx = np.flatnonzero(small & (k >= 2))
    partners = (k - 1 - pos)[idx]
    b0 = 0
    while b0 < len(idx):
        csum = np.cumsum(partners[b0:])
        b1 = b0 + max(1, int(np.searchsorted(csum, _PAIR_BLOCK, side="right")))
        pi = np.repeat(idx[b0:b1], partners[b0:b1])
        if len(pi):
            first = np.repeat(np.cumsum(partners[b0:b1]) - partners[b0:b1], partners[b0:b1])
            pj = pi + 1 + (np.arange(len(pi)) - first)
            bad = _pair_bad(v[pi], v[pj], u[pi], u[pj], factor)
            involved[pi[bad]] = True
            involved[pj[bad]] = True
        b0 = b1
    # large groups: blocks of rows against the whole group
    for grp in np.unique(g[~small]):
        s0, n = int(starts[grp]), int(sizes[grp])
        step = max(1, _PAIR_BLOCK // n)
        for a in range(0, n, step):
            ii = np.arange(s0 + a, s0 + min(n, a + step))
            jj = np.arange(s0, s0 + n)
            bad = _pair_bad(v[ii][:, None], v[jj][None, :], u[ii][:, None], u[jj][None, :], factor)
            bad &= jj[None, :] > ii[:, None]
            involved[ii[bad.any(axis=1)]] = True
            involved[jj[bad.any(axis=0)]] = True
    if not involved.any():
        return []
    rows_of = order[involved]  # positions in df, grouped, table order within group
    gi = g[involved]
    acc = df["accepted"].to_numpy(object)
    qk = df["quantity_key"].to_numpy(object)
    oid = df["obs_id"].to_numpy(object)
    src = df["source_id"].to_numpy(object)
    val = df["value_h"].to_numpy(float)
    rw = df["row"].to_numpy()
    unit = df["unit_canonical"].to_numpy(object)
    typed = (df["value"].map(lambda v: f"{v:g}") + " " + df["unit"]).to_numpy(object)
    out = []
    cuts = np.flatnonzero(np.diff(gi)) + 1
    for part in np.split(rows_of, cuts):
        out.append(
            {
                "taxon": acc[part[0]],
                "quantity": qk[part[0]],
                "obs_ids": [oid[i] for i in part],
                "sources": sorted({src[i] for i in part}),
                "values": [float(val[i]) for i in part],
                "unit": _pretty(unit[part[0]]),
                "rows": [int(rw[i]) for i in part],
                "source_ids": [src[i] for i in part],
                "reported": [typed[i] for i in part],
            }
        )
    return out


def _pretty(unit: str) -> str:
    from comparo.base import units

    try:
        return units.pretty(unit)
    except Exception:  # a unit the catalogue accepted always parses; keep the text otherwise
        return unit


def describe_value(conflict: dict[str, Any], i: int) -> str:
    """One value of a conflict as a reader needs it: ``o3: 0.0001 kg (reported as 100 mg,
    row 2, source s1)``; the value is the harmonised one, in the canonical unit."""
    v = f"{conflict['values'][i]:.4g} {conflict['unit']}"
    typed = conflict.get("reported", [None] * (i + 1))[i]
    where = (
        [f"reported as {typed}"] if typed and typed.replace(" ", "") != v.replace(" ", "") else []
    )
    where.append(f"row {conflict['rows'][i]}")
    src = conflict.get("source_ids", [None] * (i + 1))[i]
    if src:
        where.append(f"source {src}")
    return f"{conflict['obs_ids'][i]}: {v} ({', '.join(where)})"


def diagnostics(ds: Dataset, *, temperature: bool = True) -> list[Problem]:
    """Curation findings as Problems for ``comparo check``: duplicates, suspected unit
    slips and conflicts (warnings), digitized/proxy/assumed values and synonyms (notes)."""
    h = harmonise(ds, temperature=temperature)
    obs_file = ds.files["observations"].name if "observations" in ds.files else "observations"
    rows = h.rows
    origin = dict(zip(rows["obs_id"], rows["_origin"], strict=True)) if "_origin" in rows else {}

    def file_of(obs_id: str) -> str:  # trace results point at their row of traces.csv
        return origin.get(obs_id) or obs_file

    file = obs_file
    out: list[Problem] = []
    beyond = (
        (rows["status"] == "excluded")
        & (rows["problem"] == "")
        & rows["reason"].str.startswith("temperature normalisation")
    )
    for r in rows[beyond].itertuples():
        out.append(
            Problem(
                "error",
                file,
                int(r.row),
                "temperature_c",
                _cell(r.temperature_c),
                "temperature-factor-range",
                r.reason,
                "the row is excluded from every table and fit until fixed",
            )
        )
    for r in rows[rows["status"] == "merged"].itertuples():
        out.append(
            Problem(
                "warning",
                file_of(r.obs_id),
                int(r.row),
                "obs_id",
                r.obs_id,
                "duplicate-row",
                r.reason,
                "it is merged, not double counted; delete one of the two rows",
            )
        )
    for s in h.unit_slips:
        out.append(
            Problem(
                "warning",
                file_of(s["obs_id"]),
                s["row"],
                "unit",
                s["unit"],
                "unit-slip",
                f"{s['quantity']} of {s['taxon']} is ~10^{s['power']} off the group median ({s['group_median']:.3g}); likely unit {s['likely_unit']}",
                "check the unit; the value is excluded from aggregation until fixed",
            )
        )
    for c in h.conflicts:
        for i, (oid, row) in enumerate(zip(c["obs_ids"], c["rows"], strict=True)):
            others = "; ".join(describe_value(c, j) for j in range(len(c["obs_ids"])) if j != i)
            out.append(
                Problem(
                    "warning",
                    file_of(oid),
                    row,
                    "value",
                    oid,
                    "conflict",
                    f"{c['quantity']} of {c['taxon']}: {describe_value(c, i)} disagrees with {others}",
                    "check both sources; the per-taxon value combines them",
                )
            )
    out += _temperature_notes(ds, h, file)
    out += _phylo_warnings(ds, h, file_of, temperature)
    for b in ("digitized", "proxy", "assumed"):
        for r in rows[rows["basis"] == b].itertuples():
            extra = f" (stands in from {r.proxy_taxon})" if b == "proxy" else ""
            out.append(
                Problem(
                    "note",
                    file,
                    int(r.row),
                    "basis",
                    b,
                    f"basis-{b}",
                    f"{r.quantity_key} of {r.accepted} is {b}{extra}",
                    "",
                )
            )
    syn = rows[
        (rows["accepted"] != rows["taxon"]) & (rows["_origin"] == "" if "_origin" in rows else True)
    ]
    for name, part in syn.groupby("taxon"):
        out.append(
            Problem(
                "note",
                file,
                int(part["row"].iat[0]),
                "taxon",
                name,
                "synonym",
                f"reported name mapped to accepted name {part['accepted'].iat[0]!r} ({len(part)} row(s))",
                "",
            )
        )
    n_traces = int((rows["_origin"] != "").sum()) if "_origin" in rows else 0
    if n_traces:
        out.append(
            Problem(
                "note",
                TRACE_ROWS_FILE,
                None,
                None,
                str(n_traces),
                TRACE_ROWS_RULE,
                f"{n_traces} row(s) computed from the traces (frequency, loop area, work ...) join the "
                f"{int((rows['_origin'] == '').sum())} rows of the observations table",
                "audit and the report count both",
            )
        )
    return out


def _phylo_warnings(ds: Dataset, h: Harmonised, file_of, temperature: bool) -> list[Problem]:
    """Warnings for values far from what their relatives on the tree predict (the check of
    ``comparo.phylo.outliers``, imported lazily: a later room's check, like the gate hooks)."""
    if ds.tree is None:
        return []
    from comparo.phylo.outliers import hint, phylo_outliers

    found = phylo_outliers(ds, harmonised=h, temperature=temperature)
    row_of = dict(zip(h.rows["obs_id"], h.rows["row"], strict=True))
    out: list[Problem] = []
    for f in found.flagged:
        unit = _pretty(f["unit"])
        lo, hi = f["range"]
        msg = (
            f"{f['quantity']} of {f['taxon']} = {f['value']:.4g} {unit} is {f['ratio']:.3g} times "
            f"what its relatives on the tree predict ({f['predicted']:.3g} {unit}, 95% range "
            f"{lo:.3g} to {hi:.3g}); leave-one-out z = {f['z']:.2f}, beyond {f['threshold']:.2f}"
        )
        for oid in f["obs_ids"]:
            row = row_of.get(oid)
            out.append(
                Problem(
                    "warning",
                    file_of(oid),
                    int(row) if row is not None else None,
                    "value",
                    oid,
                    "phylo-outlier",
                    msg,
                    hint(f["value"], lo, hi),
                )
            )
    return out


TRACE_ROWS_RULE = "trace-rows"  # the note of diagnostics() counting the rows computed from traces
TRACE_ROWS_FILE = "traces.csv"


def _temperature_notes(ds: Dataset, h: Harmonised, file: str) -> list[Problem]:
    """Notes on the temperature policy for ``check`` (docs/methods/temperature.md): a taxon
    brought to the fallback temperature for want of an operating temperature, a
    heterotherm's in-vivo value normalised, a per-taxon value combining values that
    refer to different temperatures."""
    out: list[Problem] = []
    rows = (
        h.rows[(h.rows["status"] == "used") & (h.rows.get("temperature_rule", "") != "")]
        if "temperature_rule" in h.rows
        else h.rows.iloc[:0]
    )
    if h.policy is None or rows.empty:
        return out
    thermo, t_op, _ = _thermal_columns(ds, rows["accepted"])
    normalised = rows["temperature_rule"].isin(["Q10", "Arrhenius"]).to_numpy(bool)
    if h.policy.operating:
        fb = normalised & ~np.isfinite(t_op)
        for name, part in rows[fb].groupby("accepted", sort=True):
            out.append(
                Problem(
                    "note",
                    file,
                    int(part["row"].iat[0]),
                    "taxon",
                    name,
                    "temperature-fallback",
                    f"{name} has no operating_temperature_c: its {len(part)} "
                    "temperature-sensitive value(s) are "
                    f"brought to the fallback {h.reference_temperature_c:g} °C",
                    "give operating_temperature_c in taxa.csv",
                )
            )
    prep = (
        rows["preparation"].fillna("").astype(str).to_numpy(object)
        if "preparation" in rows
        else np.full(len(rows), "", dtype=object)
    )
    het = (
        normalised
        & (thermo == "heterotherm")
        & (
            (prep == "in_vivo")
            | (
                (prep == "")
                & rows["quantity_key"]
                .map(lambda k: ds.catalog[k].kind == "frequency")
                .to_numpy(bool)
            )
        )
    )
    for r, op in zip(rows[het].itertuples(), t_op[het], strict=True):
        why = (
            "it has no operating_temperature_c"
            if not np.isfinite(op)
            else f"it was measured at {r.temperature_c:g} °C, away from its operating "
            f"temperature {op:g} °C"
        )
        out.append(
            Problem(
                "note",
                file,
                int(r.row),
                "temperature_c",
                _cell(r.temperature_c),
                "temperature-heterotherm",
                f"{r.quantity_key} of heterotherm {r.accepted} is normalised like an "
                f"ectotherm's: {why}",
                f"the tolerance is {h.policy.heterotherm_tolerance_c:g} K "
                "([temperature] heterotherm_tolerance_c)",
            )
        )
    vt = pd.to_numeric(rows["value_temp_c"], errors="coerce")
    spread = (
        pd.DataFrame({"v": vt.to_numpy(float), "row": rows["row"].to_numpy()})
        .groupby(
            [rows["accepted"].to_numpy(object), rows["quantity_key"].to_numpy(object)], sort=True
        )
        .agg(min=("v", "min"), max=("v", "max"), row=("row", "first"))
    )
    for (name, q), r in spread[(spread["max"] - spread["min"]) > 0.5].iterrows():
        out.append(
            Problem(
                "note",
                file,
                int(r["row"]),
                "temperature_c",
                f"{r['min']:g} to {r['max']:g}",
                "temperature-mixed",
                f"{q} of {name}: the per-taxon value combines values that refer to "
                f"{r['min']:g} to {r['max']:g} °C "
                f"(some kept as measured); {q}_temp_c is their mean",
                'set regulated_in_vivo = "normalise" to bring them to one temperature',
            )
        )
    return out


def _cell(v) -> str:
    return (
        ""
        if v is None or (isinstance(v, float) and not np.isfinite(v))
        else f"{v:g}"
        if isinstance(v, float)
        else str(v)
    )


def gate_problems(ds: Dataset) -> list[Problem]:
    """What a later step (derive, fit, report) would reject in this dataset, found by
    ``comparo check`` first: settings types and ratio expressions, tree branch lengths
    and tips. Each step contributes one function ``(Dataset) -> list[Problem]``; they
    run whenever the dataset could be read, so every problem comes in one pass."""
    found: list[Problem] = []
    for hook in _gate_hooks():
        found += hook(ds)
    return found


def _gate_hooks() -> list:
    """The gate's checks, imported when ``check`` runs (one line per step)."""
    from comparo.phylo import tree_problems
    from comparo.traces.files import trace_problems
    from comparo.validation.settings import settings_problems

    hooks: list = [settings_problems, tree_problems, trace_problems]
    return hooks


def review(folder) -> CheckResult:
    """:func:`comparo.validation.tables.check`, plus :func:`gate_problems`, plus (when the table
    has no errors) the curation :func:`diagnostics`: what ``comparo check`` prints."""
    from dataclasses import replace

    from comparo.validation.tables import check

    result = check(folder)
    if result.dataset is None:
        return result
    gate = gate_problems(result.dataset)
    extra = (
        gate
        if (not result.ok or any(p.severity == "error" for p in gate))
        else gate + diagnostics(result.dataset)
    )
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


# --------------------------------------------------------------------------- per taxon


def _combine(part: pd.DataFrame, how: str) -> tuple[float, float]:
    v = part["value_h"].to_numpy(float)
    u = part["u_h"].to_numpy(float)
    n = part["n"].to_numpy(float)
    if len(v) == 1:
        return float(v[0]), float(u[0])
    if how == "median":
        med = float(np.median(v))
        # standard uncertainty of a median ~ 1.2533 x that of the mean (normal errors; from memory)
        return med, float(1.2533 * np.std(v, ddof=1) / math.sqrt(len(v)))
    if np.all(np.isfinite(u) & (u > 0)):
        w = 1.0 / u**2
        mean = float(np.sum(w * v) / np.sum(w))
        u_c = 1.0 / math.sqrt(np.sum(w))
        chi2 = float(np.sum(w * (v - mean) ** 2))
        birge = math.sqrt(
            chi2 / (len(v) - 1)
        )  # Birge ratio: inflate when values scatter more than their uncertainties
        return mean, u_c * max(1.0, birge)
    w = np.where(np.isfinite(n) & (n > 0), n, 1.0)
    mean = float(np.sum(w * v) / np.sum(w))
    return mean, float(np.std(v, ddof=1) / math.sqrt(len(v)))


def _ivw_scaled(V: np.ndarray, U: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Inverse-variance weighted mean and its Birge-inflated standard uncertainty per row,
    with weights (min u / u)^2 <= 1 so that no weight over- or underflows."""
    k = V.shape[1]
    umin = U.min(axis=1, keepdims=True)
    W = (umin / U) ** 2
    sw = W.sum(axis=1)
    mean = np.sum(W * V, axis=1) / sw
    spread = np.sqrt(
        np.sum(W * (V - mean[:, None]) ** 2, axis=1) / (k - 1)
    )  # = Birge ratio x min u
    return mean, np.maximum(umin[:, 0], spread) / np.sqrt(sw)


def _aggregate(part: pd.DataFrame, q: str, how: str, rank: dict[str, int]) -> pd.DataFrame:
    """:func:`_combine` for every taxon of one quantity at once.

    Taxa with the same number of values are stacked into one 2-D array and
    reduced along rows, which numpy sums exactly as it sums each row alone, so
    the numbers equal those of a per-taxon loop bit for bit.
    """
    codes, taxa = pd.factorize(part["accepted"].to_numpy(object))  # order of first appearance
    order = np.argsort(codes, kind="stable")  # grouped, table order within a taxon
    c = codes[order]
    v = part["value_h"].to_numpy(float)[order]
    u = part["u_h"].to_numpy(float)[order]
    n = part["n"].to_numpy(float)[order]
    sizes = np.bincount(c, minlength=len(taxa))
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    val = np.empty(len(taxa))
    unc = np.empty(len(taxa))
    for k in np.unique(sizes):
        gs = np.flatnonzero(sizes == k)
        idx = starts[gs][:, None] + np.arange(k)[None, :]
        V, U, N = v[idx], u[idx], n[idx]
        if k == 1:
            val[gs], unc[gs] = V[:, 0], U[:, 0]
            continue
        if how == "median":
            val[gs] = np.median(V, axis=1)
            # standard uncertainty of a median ~ 1.2533 x that of the mean (normal errors; from memory)
            unc[gs] = 1.2533 * np.std(V, axis=1, ddof=1) / math.sqrt(k)
            continue
        ivw = np.all(np.isfinite(U) & (U > 0), axis=1)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if ivw.any():
                Vi, W = V[ivw], 1.0 / U[ivw] ** 2
                sw = np.sum(W, axis=1)
                mean = np.sum(W * Vi, axis=1) / sw
                chi2 = np.sum(W * (Vi - mean[:, None]) ** 2, axis=1)
                birge = np.sqrt(
                    chi2 / (k - 1)
                )  # Birge ratio: inflate when values scatter more than their uncertainties
                u_c = (1.0 / np.sqrt(sw)) * np.where(birge > 1.0, birge, 1.0)
                off = ~(np.isfinite(mean) & np.isfinite(u_c))
                if off.any():  # weights 1/u^2 over- or underflowed: the same mean with weights scaled by min(u)^2
                    mean[off], u_c[off] = _ivw_scaled(Vi[off], U[ivw][off])
                val[gs[ivw]] = mean
                unc[gs[ivw]] = u_c
            if (~ivw).any():
                Vn, Nn = V[~ivw], N[~ivw]
                W = np.where(np.isfinite(Nn) & (Nn > 0), Nn, 1.0)
                val[gs[~ivw]] = np.sum(W * Vn, axis=1) / np.sum(W, axis=1)
                unc[gs[~ivw]] = np.std(Vn, axis=1, ddof=1) / math.sqrt(k)
    bounds = np.concatenate([starts, [len(c)]])
    ids = part["obs_id"].to_numpy(object)[order]
    src = pd.Series(part["source_id"].to_numpy(object)[order])
    nsrc = src.groupby(c, sort=True).nunique().to_numpy(int)
    brank = part["basis_effective"].map(rank).to_numpy(int)[order]
    weakest = np.maximum.reduceat(brank, starts) if len(c) else brank
    return pd.DataFrame(
        {
            q: val,
            f"{q}_u": unc,
            f"{q}_n": sizes.astype(int),
            f"{q}_nsrc": nsrc,
            f"{q}_basis": [BASIS_ORDER[r] for r in weakest],
            f"{q}_obs": [";".join(ids[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)],
        },
        index=pd.Index(list(taxa)),
    )


def per_taxon(
    ds: Dataset,
    *,
    temperature: bool = True,
    aggregate: str | None = None,
    harmonised: Harmonised | None = None,
) -> pd.DataFrame:
    """One row per accepted taxon: per quantity Q the columns ``Q`` (value in the
    catalogue's canonical unit), ``Q_u`` (standard uncertainty), ``Q_n`` (values
    behind it), ``Q_nsrc`` (sources behind it), ``Q_basis`` (weakest basis:
    reported > computed > digitized > proxy > assumed) and ``Q_obs`` (';'-joined
    obs_ids). Also ``taxon``, the grouping columns of taxa.csv and
    ``temperature_c`` (°C the temperature-sensitive values refer to).

    Aggregation (``aggregate`` or settings ``aggregate``): ``mean`` (default) is
    the inverse-variance weighted mean when every value has an uncertainty
    (standard uncertainty 1/sqrt(sum w), inflated by the Birge ratio when the
    values scatter more than their uncertainties allow), else the n-weighted
    mean (uncertainty: sd of the values / sqrt(k)); ``median`` the median.
    """
    from comparo.validation.dataset import as_dataset

    ds = as_dataset(ds)
    how = aggregate or ds.settings.get("aggregate", "mean")
    if how not in ("mean", "median"):
        from comparo.base.errors import UsageError

        raise UsageError(f"aggregate must be 'mean' or 'median', not {how!r}")
    h = harmonised or harmonise(ds, temperature=temperature)
    used = h.rows[h.rows["status"] == "used"]
    cat = ds.catalog
    taxa = sorted(
        set(h.rows.loc[h.rows["status"] != "excluded", "accepted"]) | set(used["accepted"])
    )
    out = pd.DataFrame({"taxon": taxa})
    groups = taxon_groups(ds)
    if len(groups.columns) > 1:
        out = out.merge(groups, on="taxon", how="left")
        for c in groups.columns[1:]:
            out[c] = out[c].fillna("")
    if h.policy is not None and h.policy.operating:
        _, t_op, _ = _thermal_columns(ds, out["taxon"])
        out["temperature_c"] = np.where(np.isfinite(t_op), t_op, h.reference_temperature_c)
    elif h.reference_temperature_c is not None:
        out["temperature_c"] = h.reference_temperature_c
    else:
        ts = used[
            map_distinct(used["quantity_key"], lambda k: k in cat and cat[k].temperature_sensitive)
        ]
        out["temperature_c"] = out["taxon"].map(ts.groupby("accepted")["temperature_c"].mean())
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    order = [k for k in cat if not cat[k].converts_to]
    blocks = []
    for q in order:
        part = used[used["quantity_key"] == q]
        if part.empty:
            continue
        block = _aggregate(part, q, how, rank)
        if cat[q].temperature_sensitive:
            block[f"{q}_temp_c"] = _temperature_of(part).reindex(block.index).to_numpy(float)
        blocks.append(block)
    if blocks:
        wide = pd.concat(blocks, axis=1)
        out = out.merge(wide, left_on="taxon", right_index=True, how="left")
        for c in out.columns:
            if c.endswith(("_n", "_nsrc")):
                out[c] = out[c].fillna(0).astype(int)
            elif c.endswith(("_basis", "_obs")):
                out[c] = out[c].fillna("")
    out.attrs["reference_temperature_c"] = h.reference_temperature_c
    out.attrs["temperature"] = _temperature_record(used, cat, h)
    return out


# what the columns of the per-taxon and derived tables hold, by suffix (longest first)
_SUFFIX_MEANING: tuple[tuple[str, bool, str], ...] = (  # suffix, in the quantity's unit?, meaning
    ("_mc_median", True, "Monte Carlo median"),
    ("_mc_lo68", True, "Monte Carlo 68% interval, low end"),
    ("_mc_hi68", True, "Monte Carlo 68% interval, high end"),
    ("_mc_lo95", True, "Monte Carlo 95% interval, low end"),
    ("_mc_hi95", True, "Monte Carlo 95% interval, high end"),
    ("_mc_u", True, "Monte Carlo standard deviation"),
    ("_nonlinear", False, "first-order and Monte Carlo uncertainties differ by more than 20%"),
    ("_temp_c", False, "temperature (°C) the per-taxon value refers to"),
    ("_nsrc", False, "number of distinct sources behind the value"),
    (
        "_basis",
        False,
        "weakest basis of the values behind it (reported > computed > digitized > proxy > assumed)",
    ),
    ("_method", False, "how the derived value was computed"),
    ("_missing", False, "inputs missing for the derived value"),
    ("_obs", False, "obs_ids of the values behind it (;-joined)"),
    ("_n", False, "number of values combined"),
    ("_u", True, "standard uncertainty"),
)


def column_units(table: pd.DataFrame, catalog) -> pd.DataFrame:
    """What each column of a per-taxon (or derived) table holds: columns ``column``, ``unit``
    (the canonical unit as pint reads it; empty for text, counts and dimensionless columns)
    and ``meaning``. Units of derived keys come from ``table.attrs['units']``; the
    catalogue gives the others. This is the table written beside a per-taxon CSV
    (``table.units.csv``)."""
    derived = dict(table.attrs.get("units", {}))
    keys = {k: catalog[k].unit for k in catalog} | derived
    groups = set(table.columns) - {"taxon", "temperature_c"}
    rows = []
    for col in table.columns:
        unit, meaning = "", ""
        if col == "taxon":
            meaning = "accepted taxon name"
        elif col == "temperature_c":
            unit, meaning = "degC", "temperature the temperature-sensitive values refer to"
        elif col == "operating_temperature_c":
            unit, meaning = (
                "degC",
                "operating (body or muscle) temperature during the behaviour (taxa.csv)",
            )
        elif col in keys:
            unit, meaning = (
                keys[col],
                "value in the canonical unit" if col not in derived else "derived value",
            )
        elif col == "regime":
            meaning = "kinetic, hydraulic or undetermined"
        else:
            for suffix, same, what in _SUFFIX_MEANING:
                base = col[: -len(suffix)]
                if col.endswith(suffix) and base in keys | {"regime": ""}:
                    unit = keys.get(base, "") if same else ("degC" if suffix == "_temp_c" else "")
                    meaning = f"{base}: {what}"
                    break
            else:
                if col in groups:
                    meaning = "grouping column (taxa.csv)"
        rows.append(
            {
                "column": col,
                "unit": "" if unit in ("1", "dimensionless") else unit,
                "meaning": meaning,
            }
        )
    return pd.DataFrame(rows, columns=["column", "unit", "meaning"])


def _temperature_of(part: pd.DataFrame) -> pd.Series:
    """°C each taxon's value of one quantity refers to: the mean over its values of the
    temperature each refers to (the target where normalised, the measured temperature
    where kept as measured, not normalised or computed from a trace); NaN where no value
    has one. Values at different temperatures are combined as they are (the per-taxon
    value then refers to their mean temperature; docs/methods/temperature.md)."""
    vt = (
        pd.to_numeric(part["value_temp_c"], errors="coerce")
        if "value_temp_c" in part
        else pd.Series(np.nan, index=part.index)
    )
    vt = vt.fillna(pd.to_numeric(part["temperature_c"], errors="coerce"))
    return vt.groupby(part["accepted"].to_numpy(object)).mean()


def _temperature_record(used: pd.DataFrame, cat, h: Harmonised) -> dict[str, Any]:
    """``attrs["temperature"]`` of the per-taxon table: where values were brought (``to``)
    and, per quantity and taxon, what happened to its temperature-sensitive values used:
    ``(quantity, taxon, values, rescaled, lowest factor, highest factor, kept as measured,
    without temperature, rescaled to the fallback)`` (factors over the rescaled values; ±inf
    when none; the last: with ``"operating"``, rescaled values of a taxon without an operating
    temperature, brought to ``fallback_c``). Read by
    :func:`comparo.validation.temperature.fit_temperature`."""
    ts = used[
        map_distinct(
            used["quantity_key"], lambda k: k in cat and cat[k].temperature_sensitive
        ).to_numpy(bool)
    ]
    rule = (
        ts["temperature_rule"].fillna("").astype(str).to_numpy(object)
        if "temperature_rule" in ts
        else np.full(len(ts), "", dtype=object)
    )
    if h.policy is None:
        treat = np.full(len(ts), "off", dtype=object)
    else:
        treat = np.select(
            [(rule == "Q10") | (rule == "Arrhenius"), rule == "as measured", rule == "none"],
            ["normalised", "kept", "none"],
            "measured",
        )
    f = ts["temperature_factor"].to_numpy(float)
    norm = (treat == "normalised") & (f != 1.0)
    note = (
        ts["temperature_note"].fillna("").astype(str)
        if "temperature_note" in ts
        else pd.Series("", index=ts.index)
    )
    fallback = (
        norm & note.str.contains("no operating_temperature_c: fallback", regex=False).to_numpy()
    )
    part = pd.DataFrame(
        {
            "q": ts["quantity_key"].to_numpy(object),
            "t": ts["accepted"].to_numpy(object),
            "n": np.ones(len(ts), dtype=int),
            "rescaled": norm.astype(int),
            "fmin": np.where(norm, f, np.inf),
            "fmax": np.where(norm, f, -np.inf),
            "kept": (treat == "kept").astype(int),
            "none": (treat == "none").astype(int),
            "fallback": fallback.astype(int),
        }
    )
    agg = part.groupby(["q", "t"], sort=False).agg(
        n=("n", "sum"),
        rescaled=("rescaled", "sum"),
        fmin=("fmin", "min"),
        fmax=("fmax", "max"),
        kept=("kept", "sum"),
        none=("none", "sum"),
        fallback=("fallback", "sum"),
    )
    recs = tuple(
        (
            q,
            t,
            int(r.n),
            int(r.rescaled),
            float(r.fmin),
            float(r.fmax),
            int(r.kept),
            int(r.none),
            int(r.fallback),
        )
        for (q, t), r in zip(agg.index, agg.itertuples(index=False), strict=True)
    )
    return {
        "to": h.policy.target_text if h.policy is not None else "off",
        "values": recs,
        "fallback_c": h.policy.reference_c if h.policy is not None else None,
    }
