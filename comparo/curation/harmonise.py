"""Harmonise a validated dataset: :func:`harmonise` takes a
:class:`~comparo.validation.tables.Dataset` (and optionally its reduced traces) and returns
the :class:`Harmonised` rows.

Steps, each a pure function over the observation frame:

1. names: reported names -> accepted names (taxa.csv), the mapping recorded;
2. temperature: temperature-sensitive values -> the reference temperature
   (Q10, or Arrhenius where an activation energy is given), factor recorded;
3. standard uncertainty: sd/se/ci95/range_half -> a standard uncertainty of
   the reported value (GUM, JCGM 100:2008);
4. duplicates (merged), suspected unit slips (excluded), the rows computed from the
   traces (:mod:`comparo.traces.rows`) joined, conflicts found.

Every row ends as ``used``, ``merged`` (a duplicate of another row) or
``excluded`` (with a reason). The per-taxon table is :mod:`comparo.curation.aggregation`,
the findings ``check`` prints :mod:`comparo.curation.findings`; :func:`cycles` gives the
traces with their taxon values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from comparo.validation.numbers import WORKING_RANGE, map_distinct
from comparo.validation.tables import Dataset

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
    traces : comparo.traces.files.TraceSet or None
        The dataset's traces with their taxon values (the rows computed from them are in
        *rows*); None without traces.csv.
    """

    rows: pd.DataFrame
    conflicts: list[dict[str, Any]] = field(default_factory=list)
    unit_slips: list[dict[str, Any]] = field(default_factory=list)
    reference_temperature_c: float | None = None
    policy: Any = None
    traces: Any = None


def _numbers_only(table: Any) -> dict[str, float]:
    """The numeric entries of a settings table (anything else is an error in check)."""
    if not isinstance(table, dict):
        return {}
    return {
        k: float(v)
        for k, v in table.items()
        if isinstance(v, int | float) and not isinstance(v, bool)
    }


def thermal_columns(
    ds: Dataset, accepted: pd.Series, with_groups: bool = False
) -> tuple[np.ndarray, np.ndarray, list[dict[str, str]]]:
    """Per row of *accepted* (accepted names): the taxon's thermoregulation (text, '' when
    not given), its
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
    thermo, t_op, groups = thermal_columns(ds, obs["accepted"], with_groups=bool(policy.rules))
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
    ds: Dataset,
    *,
    temperature: bool = True,
    exclude_unit_slips: bool = True,
    traces: Any = None,
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

    Traces (a dataset with traces.csv): *traces* is the dataset's reduced
    :class:`~comparo.traces.files.TraceSet` (:func:`comparo.traces.files.read_traces`),
    reduced here when not given. Each trace gets its taxon's values (combined from the
    rows still in use) and joins the rows as ``computed`` values (``_origin`` names
    traces.csv); ``Harmonised.traces`` keeps the traces with those values.

    Raises
    ------
    InputError
        When traces.csv or a trace file has an error (nothing is dropped silently).
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
            f"suspected unit slip: off the group median by ~10^{slip_ids[o]['power']}; likely unit "
            f"{slip_ids[o]['likely_unit']}"
            for o in obs.loc[m, "obs_id"]
        ]
    if ds.traces is not None:  # per-trace results join as computed rows
        h.traces, obs = _join_traces(ds, obs, traces)
        h.rows = obs
    h.conflicts = find_conflicts(obs, ds)
    return h


def _beyond_range(obs: pd.DataFrame) -> list[tuple[np.ndarray, str]]:
    """Rows whose harmonised value or uncertainty left the range of a double or
    :data:`~comparo.validation.tables.WORKING_RANGE` (an extreme temperature factor), with
    the reason."""
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
                f"temperature normalisation takes the {name} outside the range comparo computes "
                f"with ({lo:g} to {hi:g} in the canonical unit): check temperature_c and the Q10",
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
                "unit": pretty_unit(unit[part[0]]),
                "rows": [int(rw[i]) for i in part],
                "source_ids": [src[i] for i in part],
                "reported": [typed[i] for i in part],
            }
        )
    return out


def pretty_unit(unit: str) -> str:
    """*unit* as a reader writes it (``kg/m³``); the text itself if it does not parse."""
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


def _join_traces(ds: Dataset, obs: pd.DataFrame, traces: Any) -> tuple[Any, pd.DataFrame]:
    """The traces with their taxon values (from the rows of *obs* still in use) and *obs*
    with the rows computed from them (unchanged when no trace gives a value)."""
    from comparo.curation.combine import taxon_values
    from comparo.traces.files import read_traces
    from comparo.traces.rows import TAXON_INPUTS, trace_rows, with_taxon_values

    ts = traces if traces is not None else read_traces(ds)
    if not ts.ok:
        from comparo.base.errors import InputError

        raise InputError([p for p in ts.problems if p.severity == "error"])
    full = with_taxon_values(ds, ts, taxon_values(obs, TAXON_INPUTS))
    base = obs.assign(_origin="") if "_origin" not in obs else obs
    add = trace_rows(ds, full, dict(base.dtypes))
    if add.empty:
        return full, obs
    return full, pd.concat([base, add], ignore_index=True)


def cycles(
    ds: Dataset,
    *,
    temperature: bool = True,
    drift_removal: bool = True,
    harmonised: Harmonised | None = None,
    traces: Any = None,
) -> Any:
    """Every trace of a loaded dataset reduced, with the taxon values added (SI units): a
    :class:`~comparo.traces.files.TraceSet`.

    ``drift_removal=False`` (``comparo cycles --no-drift-removal``) reduces the signals as
    recorded. It changes what this returns only: the values that join the harmonised
    table (``table``, ``derive``, ``fit``, ``report``) always come with drift removal.
    *harmonised* (:func:`harmonise` of *ds*) and *traces* (its reduced traces) are used when
    given, computed otherwise.

    Raises
    ------
    InputError
        When traces.csv or a trace file has an error.
    """
    from comparo.base.errors import InputError
    from comparo.curation.combine import taxon_values
    from comparo.traces.files import TraceSet, read_traces
    from comparo.traces.rows import TAXON_INPUTS, with_taxon_values
    from comparo.validation.dataset import as_dataset

    ds = as_dataset(ds)
    if ds.traces is None:
        return TraceSet()
    h = harmonised
    if h is None or h.traces is None:
        ts = traces if traces is not None else read_traces(ds)
        if not ts.ok:
            raise InputError([p for p in ts.problems if p.severity == "error"])
        h = harmonise(ds, temperature=temperature, traces=ts)
    if drift_removal:
        return h.traces
    raw = read_traces(ds, drift_removal=False)
    if not raw.ok:  # a trace that splits into cycles only with its drift removed
        raise InputError([p for p in raw.problems if p.severity == "error"])
    rows = h.rows[h.rows["_origin"] == ""] if "_origin" in h.rows else h.rows
    return with_taxon_values(ds, raw, taxon_values(rows, TAXON_INPUTS))
