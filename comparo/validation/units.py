"""Values brought to the canonical units of the quantity catalogue, with a problem for
every unit that cannot be read or does not measure the quantity's kind."""

from __future__ import annotations

import numpy as np
import pandas as pd

from comparo.base.catalog import Catalog
from comparo.reading.tables import RawTable
from comparo.validation.numbers import WORKING_RANGE, map_distinct
from comparo.validation.rows import BASIS_ORDER, RowProblems


def beyond_working_range(
    value: np.ndarray, converted: np.ndarray, factor: np.ndarray
) -> np.ndarray:
    """Non-zero finite values whose conversion over- or underflows a double or leaves
    :data:`WORKING_RANGE`."""
    mag = np.abs(converted)
    with np.errstate(invalid="ignore"):
        return (
            np.isfinite(value)
            & (value != 0)
            & np.isfinite(factor)
            & (~np.isfinite(converted) | (mag < WORKING_RANGE[0]) | (mag > WORKING_RANGE[1]))
        )


def to_canonical_units(
    c: RowProblems,
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    qty: pd.Series,
    known: pd.Series,
    target_key: pd.Series,
) -> None:
    """Units parsed and dimension-checked; value_canonical, uncertainty_canonical, unit_canonical,
    quantity_key and basis_effective added to *obs* (values beyond the working range set to NaN)."""
    from comparo.base import units

    canon = map_distinct(target_key, lambda k: catalog[k].unit if k else "")
    alias = map_distinct(qty, lambda k: catalog[k].factor if k in catalog else np.nan).astype(float)
    factor = _unit_factors(c, obs, catalog, qty, known)
    # own unit -> target canonical unit (aliases such as diameter -> radius keep the unit kind)
    to_target = np.array(
        [
            units.conversion_factor(catalog[q].unit, catalog.target(q).unit)
            if q in catalog
            else np.nan
            for q in qty.drop_duplicates()
        ]
    )
    tmap = dict(zip(qty.drop_duplicates(), to_target, strict=True))
    total = factor * alias.to_numpy() * qty.map(tmap).to_numpy(dtype=float)
    value = obs["value"].to_numpy(dtype=float)
    obs["quantity_key"] = target_key.to_numpy()
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        obs["value_canonical"] = value * total
        obs["uncertainty_canonical"] = obs["uncertainty"].to_numpy(dtype=float) * total
    _beyond_range(c, raw, obs, canon, total, target_key, catalog)
    obs["unit_canonical"] = canon.to_numpy()
    _effective_basis(obs, qty, catalog)


def _unit_factors(
    c: RowProblems, obs: pd.DataFrame, catalog: Catalog, qty: pd.Series, known: pd.Series
) -> np.ndarray:
    """Per row, the factor from the unit typed to the quantity's own unit (NaN where the unit
    cannot be read or does not measure the quantity's kind: each such row a problem)."""
    from comparo.base import units

    # parse each distinct string once, dimension-check each distinct (quantity, unit)
    factor = np.full(len(obs), np.nan)
    unit_col = obs["unit"]
    pairs = pd.DataFrame({"q": qty, "u": unit_col})[known & (unit_col != "")].drop_duplicates()
    bad_unit: dict[str, str] = {}
    fac: dict[tuple[str, str], float] = {}
    for q, u in pairs.itertuples(index=False):
        if u in bad_unit:
            continue
        try:
            units.check_unit(u)
        except units.UnitParseError as exc:
            bad_unit[u] = str(exc)
            continue
        own = catalog[q].unit
        try:
            fac[(q, u)] = units.conversion_factor(u, own)
        except Exception:
            fac[(q, u)] = np.nan
    if bad_unit:
        mask = unit_col.isin(list(bad_unit))
        c.add(
            mask,
            "error",
            "unit",
            "unit-unknown",
            lambda i: bad_unit[unit_col.iat[i]],
            "write units as pint reads them: um, µm, nm, mm, kPa, Pa, 1/s, Hz, mPa*s, nm**2, kg, "
            "mg",
        )
    if fac:
        keys = pd.MultiIndex.from_arrays([qty, unit_col])
        factor = pd.Series(fac).reindex(keys).to_numpy(dtype=float)
        mism = (
            known.to_numpy()
            & ~unit_col.isin(list(bad_unit)).to_numpy()
            & (unit_col != "").to_numpy()
            & np.isnan(factor)
        )

        def dim_msg(i):
            q = catalog[qty.iat[i]]
            return (
                f"unit {unit_col.iat[i]!r} does not measure a {q.kind} (the quantity {q.key!r} is "
                f"in {q.unit})"
            )

        c.add(
            mism,
            "error",
            "unit",
            "unit-dimension",
            dim_msg,
            lambda i: (
                f"give {qty.iat[i]} in a {catalog[qty.iat[i]].kind} unit such as "
                f"{units.pretty(catalog[qty.iat[i]].unit)}"
            ),
        )
    return factor


def _beyond_range(
    c: RowProblems,
    raw: RawTable,
    obs: pd.DataFrame,
    canon: pd.Series,
    total: np.ndarray,
    target_key: pd.Series,
    catalog: Catalog,
) -> None:
    """Values and uncertainties whose conversion leaves the working range: an error each,
    and the converted value set to NaN."""
    from comparo.base import units

    unit_col = obs["unit"]
    not_temperature = map_distinct(
        target_key, lambda k: bool(k) and catalog[k].kind != "temperature"
    ).to_numpy(dtype=bool)
    for col, canon_col in (("value", "value_canonical"), ("uncertainty", "uncertainty_canonical")):
        bad = (
            beyond_working_range(
                obs[col].to_numpy(dtype=float), obs[canon_col].to_numpy(dtype=float), total
            )
            & not_temperature
        )
        if bad.any():
            vc_all = obs[canon_col].to_numpy(dtype=float)

            def conv_msg(i, col=col, vc_all=vc_all):
                unit = units.pretty(canon.iat[i]) if canon.iat[i] else canon.iat[i]
                vc = vc_all[i]
                if not np.isfinite(vc):
                    what = f"overflows a double (becomes inf {unit})"
                elif vc == 0:
                    what = f"underflows a double (becomes 0 {unit})"
                else:
                    what = (
                        f"gives {vc:.3g} {unit}, outside the range comparo computes with "
                        f"({WORKING_RANGE[0]:g} to {WORKING_RANGE[1]:g} {unit})"
                    )
                return f"{col} {raw.frame[col].iat[i]} {unit_col.iat[i]} converted to {unit} {what}"

            c.add(
                bad,
                "error",
                col,
                f"{col}-conversion-range",
                conv_msg,
                "check the number and its unit (a mistyped exponent or unit prefix?)",
                raw.frame[col].to_numpy() if col in raw.frame else None,
            )
            obs.loc[bad, canon_col] = np.nan  # never carried into a table, an export or a fit


def _effective_basis(obs: pd.DataFrame, qty: pd.Series, catalog: Catalog) -> None:
    """``basis_effective``: the typed basis, at least 'computed' for a quantity converted
    from another (an alias such as a diameter given for a radius)."""
    is_alias = map_distinct(qty, lambda k: bool(k in catalog and catalog[k].converts_to)).to_numpy(
        dtype=bool
    )
    basis = obs["basis"].where(obs["basis"].isin(BASIS_ORDER), "assumed")
    rank = basis.map({b: i for i, b in enumerate(BASIS_ORDER)}).to_numpy(
        dtype=int
    )  # int even when there are no rows
    eff_rank = np.where(is_alias, np.maximum(rank, BASIS_ORDER.index("computed")), rank)
    obs["basis_effective"] = np.array(BASIS_ORDER, dtype=object)[eff_rank]
