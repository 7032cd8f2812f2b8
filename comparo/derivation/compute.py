"""The derivation of a per-taxon table, :func:`derive`: leaves in SI units, the physical
model, propagation, reasons for missing values, routes and the assembled columns.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import InputError, Problem
from comparo.base.numbers import number
from comparo.base.shared import SharedRecord
from comparo.derivation.lattice import effective_radius, filament_spacing, filament_volume_fraction
from comparo.derivation.lineage import (
    column,
    join_reasons,
    lineage_columns,
    mc_columns,
    pd_concat,
    text_column,
)
from comparo.derivation.permeability_models import PERMEABILITY_MODELS, permeability
from comparo.derivation.ratios import ratios
from comparo.derivation.regime import frequency_vs_bound
from comparo.derivation.regime import regime as classify_regime
from comparo.derivation.settings import settings_with_defaults
from comparo.derivation.timescales import (
    constrained_modulus,
    frequency_bound,
    kinetic_time_two_state,
    poroelastic_diffusivity,
    poroelastic_time,
)
from comparo.derivation.uncertainty import propagate
from comparo.derivation.water import WATER_RANGE_C, water_viscosity_at

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

_TABLE_LEAVES = {  # leaf -> (quantity key, SI unit); "length" is set from the settings
    "lattice_spacing_d10": "m",
    "permeability": "m**2",
    "transverse_modulus": "Pa",
    "elastic_modulus": "Pa",
    "fluid_viscosity": "Pa*s",
    "attach_rate": "1/s",
    "detach_rate": "1/s",
    "kinetic_time": "s",
    "frequency_observed": "Hz",
}


_SI = {  # derived key -> SI unit of the internal computation
    "filament_spacing": "m",
    "filament_volume_fraction": "dimensionless",
    "permeability_est": "m**2",
    "fluid_viscosity_est": "Pa*s",
    "drained_modulus": "Pa",
    "poroelastic_diffusivity": "m**2/s",
    "poroelastic_time": "s",
    "kinetic_time": "s",
    "poro_kinetic_ratio": "dimensionless",
    "frequency_kinetic_bound": "Hz",
    "frequency_hydraulic_bound": "Hz",
    "frequency_ratio": "dimensionless",
}


def derive(
    table: pd.DataFrame,
    settings: Mapping[str, Any] | None = None,
    *,
    mc: int = 0,
    seed: int = 20240601,
    progress: bool = False,
) -> pd.DataFrame:
    """Add derived time scales, ratios, their uncertainty and lineage to a per-taxon table.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per taxon: ``taxon``, grouping columns, ``temperature_c`` (°C) and per
        catalogue quantity Q the columns Q (canonical unit), Q_u, Q_n, Q_basis, Q_obs.
        Absent quantities may have no columns. Not modified.
    settings : mapping, optional
        The ``[derive]`` settings of comparo.toml (defaults in schema/derived.toml),
        optionally with ``ratios`` (name -> expression, or a table with
        ``expression`` and ``unit``) and ``quantities`` (a dataset's own catalogue
        entries, for the units of ratio operands and of the length setting).
    mc : int
        Monte Carlo draws per taxon (0: first-order uncertainty only). Refused above a
        cap computed from this machine's memory and a 600 s time budget
        (:func:`comparo.base.arguments.check_mc`; the message states the cap and how).
    progress : bool
        Show a progress bar on standard error for a long Monte Carlo run.
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    pandas.DataFrame
        A copy of *table* with, per derived key D (schema/derived.toml) and user
        ratio, the columns D (unit of derived.toml), D_u (GUM standard uncertainty),
        D_basis, D_obs, D_method, D_missing, and with ``mc > 0`` also D_mc_median,
        D_mc_lo68, D_mc_hi68, D_mc_lo95, D_mc_hi95, D_mc_u (MC standard deviation)
        and D_nonlinear (GUM and MC standard uncertainties differ by more than 20%).
        ``regime`` is text ('kinetic', 'hydraulic', or 'undetermined' when the 95%
        interval of poro_kinetic_ratio, first order or Monte Carlo, holds the boundary)
        with basis, obs, method and missing columns only; ``frequency_vs_bound`` is text
        ('below', 'above', 'undetermined': the 95% interval of frequency_ratio against
        1). ``attrs['units']`` maps each added key to its unit.

    Raises
    ------
    InputError
        For a bad setting or ratio expression (naming the setting).

    Notes
    -----
    Uncertainty: first order (JCGM 100:2008) on the log scale with all inputs
    independent; Monte Carlo (JCGM 101:2008) with lognormal inputs (mean = value,
    sd = standard uncertainty), all taxa at once. Equations: docs/methods/derived.md.

    References
    ----------
    JCGM 100:2008 Evaluation of measurement data — Guide to the expression of
    uncertainty in measurement. JCGM 101:2008 Supplement 1 to the GUM — Propagation
    of distributions using a Monte Carlo method.
    """
    from comparo.base.arguments import check_mapping, check_mc, check_seed, check_table
    from comparo.base.catalog import load_catalog, read_schema

    check_table(table)
    check_mapping(
        settings, "settings", "a mapping like the [derive] table of comparo.toml (a dict)"
    )
    seed = check_seed(seed, "seed")
    if isinstance(mc, np.integer):
        mc = int(mc)
    mc = check_mc(mc, len(table), option="mc")
    s, ratio_settings, user_quantities = settings_with_defaults(settings)
    catalog = load_catalog(user_quantities)
    keys = read_schema("derived.toml")["keys"]
    rng = np.random.default_rng(seed)
    ignore_unknown = s["unknown_uncertainty"] == "ignore"
    length_key = s["length"]
    if length_key not in catalog or catalog.target(length_key).kind != "length":
        raise InputError(
            [
                Problem(
                    "error",
                    "comparo.toml",
                    None,
                    "derive.length",
                    str(length_key),
                    "derive-setting",
                    f"length {length_key!r} is not a length quantity of the catalogue",
                    "use a key such as 'fiber_radius'",
                )
            ]
        )
    names = {leaf: leaf for leaf in _TABLE_LEAVES} | {"length": length_key}
    lv = _table_leaves(table, catalog, names)
    thin_per_thick, temperature, t_reason = _assumed_leaves(table, s, lv)
    compute, mirrors = _physics(s)
    prop = propagate(
        compute, lv.values, lv.rel_u, ignore_unknown, mc, rng, list(_SI), mirrors, progress=progress
    )
    reasons = _missing_reasons(s, prop.values, lv.absent, t_reason)
    methods = _routes(s, lv.values, prop.values, thin_per_thick, temperature, length_key)
    mode = float(s["hydraulic_mode_factor"])
    new, units = _assemble(keys, prop, lv, names, reasons, methods, mc, mode)
    out = table.drop(columns=[c for c in new if c in table.columns])
    out = pd_concat(out, new)
    if ratio_settings:
        ratio_cols, ratio_units = ratios(
            out, ratio_settings, catalog, keys, mc, rng, ignore_unknown
        )
        out = pd_concat(out, ratio_cols)
        units.update(ratio_units)
    out.attrs = {**table.attrs, "units": SharedRecord({**table.attrs.get("units", {}), **units})}
    return out


@dataclass
class _Leaves:
    """Inputs of the derivation per leaf (SI units): values, relative standard uncertainty,
    basis, obs_ids and why a table value is absent."""

    values: dict[str, np.ndarray] = field(default_factory=dict)
    rel_u: dict[str, np.ndarray] = field(default_factory=dict)
    basis: dict[str, list[str]] = field(default_factory=dict)
    obs: dict[str, list[str]] = field(default_factory=dict)
    absent: dict[str, np.ndarray] = field(default_factory=dict)


def _table_leaves(table: pd.DataFrame, catalog, names: dict[str, str]) -> _Leaves:
    """The leaves read from the table, in SI units (non-positive values set to NaN with a
    reason)."""
    from comparo.base.units import conversion_factor

    lv = _Leaves()
    leaves, rel_u, basis, obs, absent = lv.values, lv.rel_u, lv.basis, lv.obs, lv.absent
    for leaf, si in {**_TABLE_LEAVES, "length": "m"}.items():
        key = names[leaf]
        f = conversion_factor(catalog[key].unit, si)
        x = column(table, key, f)
        u = column(table, f"{key}_u", f)
        ok = np.isfinite(x) & (x > 0)
        absent[leaf] = np.where(
            np.isnan(x), f"no {key}", np.where(ok, "", f"{key} not positive")
        ).astype(object)
        x = np.where(ok, x, np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel_u[leaf] = np.where(np.isfinite(u) & (u >= 0), u / x, np.nan)
        leaves[leaf] = x
        basis[leaf] = text_column(table, f"{key}_basis")
        obs[leaf] = text_column(table, f"{key}_obs")

    return lv


def _assumed_leaves(
    table: pd.DataFrame, s: dict[str, Any], lv: _Leaves
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The assumed leaves (filament radii, thin per thick, viscosity of the cytosol and of water);
    returns thin per thick, the temperature (°C) and why the water viscosity is missing."""
    from comparo.base.units import conversion_factor

    n = len(table)
    leaves, rel_u, basis, obs = lv.values, lv.rel_u, lv.basis, lv.obs
    tpt = s["thin_per_thick"]
    if isinstance(tpt, str):
        if tpt not in table.columns:
            raise InputError(
                [
                    Problem(
                        "error",
                        "comparo.toml",
                        None,
                        "derive.thin_per_thick",
                        tpt,
                        "derive-setting",
                        f"thin_per_thick names column {tpt!r}, which the table does not have",
                    )
                ]
            )
        thin_per_thick = column(table, tpt)
    else:
        thin_per_thick = np.full(n, float(tpt))
    temperature = column(table, "temperature_c")
    if "fallback_temperature_c" in s:
        temperature = np.where(
            np.isnan(temperature), float(s["fallback_temperature_c"]), temperature
        )
    nm = conversion_factor("nm", "m")
    fixed = {  # leaf -> (value, standard uncertainty), all "assumed"
        "thick_filament_radius": (
            s["thick_filament_radius_nm"] * nm,
            s["thick_filament_radius_u_nm"] * nm,
        ),
        "thin_filament_radius": (
            s["thin_filament_radius_nm"] * nm,
            s["thin_filament_radius_u_nm"] * nm,
        ),
        "thin_per_thick": (thin_per_thick, 0.0),
        "cytosol_viscosity_factor": (
            s["cytosol_viscosity_factor"],
            s["cytosol_viscosity_factor_u"],
        ),
        "water_viscosity": (water_viscosity_at(temperature), None),
        "modulus_fallback": (
            1.0,
            0.0,
        ),  # a factor 1 on the fallback modulus: puts "assumed" in its lineage
    }
    for leaf, (x, u) in fixed.items():
        leaves[leaf] = np.broadcast_to(np.asarray(x, dtype=float), (n,)).copy()
        with np.errstate(divide="ignore", invalid="ignore"):
            rel_u[leaf] = (
                np.full(n, float(s["water_viscosity_rel_u"]))
                if u is None
                else np.asarray(u) / leaves[leaf]
            )
        rel_u[leaf] = np.where(np.isfinite(rel_u[leaf]), rel_u[leaf], 0.0)
        basis[leaf] = ["assumed"] * n
        obs[leaf] = [""] * n
    lo, hi = WATER_RANGE_C
    t_reason = np.where(
        np.isnan(temperature),
        "no temperature_c for water viscosity",
        np.where(
            np.isnan(leaves["water_viscosity"]),
            f"temperature_c outside {lo:g}-{hi:g} C (liquid water at 0.1 MPa)",
            "",
        ),
    ).astype(object)

    return thin_per_thick, temperature, t_reason


def _physics(s: dict[str, Any]):
    """The physical model as a function of the leaves (all taxa at once, SI units), and the
    outputs that mirror another (a frequency bound from its time scale)."""
    model = s["permeability_model"]
    fallback = s["modulus_fallback"]
    nu = float(s["poisson_ratio"])
    rule = s["frequency_bound"]
    mode = float(s["hydraulic_mode_factor"])

    def compute(L: dict[str, Any]) -> dict[str, Any]:
        d10, rm, ra, na = (
            L["lattice_spacing_d10"],
            L["thick_filament_radius"],
            L["thin_filament_radius"],
            L["thin_per_thick"],
        )
        phi = filament_volume_fraction(d10, rm, ra, na)
        k_est = permeability(
            effective_radius(rm, ra, na, s["effective_radius"]), phi, model, s["kozeny_constant"]
        )
        eta_est = L["water_viscosity"] * L["cytosol_viscosity_factor"]
        eta = np.where(np.isnan(L["fluid_viscosity"]), eta_est, L["fluid_viscosity"])
        k = np.where(np.isnan(L["permeability"]), k_est, L["permeability"])
        e = L["elastic_modulus"]
        if fallback == "elastic_modulus":
            m_fb = e * L["modulus_fallback"]
        elif fallback == "constrained":
            m_fb = constrained_modulus(e, nu) * L["modulus_fallback"]
        else:
            m_fb = np.full(np.shape(e), np.nan)
        m = np.where(np.isnan(L["transverse_modulus"]), m_fb, L["transverse_modulus"])
        tau_p = poroelastic_time(L["length"], k, m, eta)
        tau_x = np.where(
            np.isnan(L["kinetic_time"]),
            kinetic_time_two_state(L["attach_rate"], L["detach_rate"]),
            L["kinetic_time"],
        )
        f_kin = frequency_bound(tau_x, rule)
        f_hyd = frequency_bound(tau_p, rule, mode)
        return {
            "filament_spacing": filament_spacing(d10),
            "filament_volume_fraction": phi,
            "permeability_est": k_est,
            "fluid_viscosity_est": eta_est,
            "drained_modulus": m,
            "poroelastic_diffusivity": poroelastic_diffusivity(k, m, eta),
            "poroelastic_time": tau_p,
            "kinetic_time": tau_x,
            "poro_kinetic_ratio": tau_p / tau_x,
            "frequency_kinetic_bound": f_kin,
            "frequency_hydraulic_bound": f_hyd,
            "frequency_ratio": L["frequency_observed"] / np.minimum(f_kin, f_hyd),
            "_regime_score": f_hyd / f_kin,
        }

    mirrors = {
        "frequency_kinetic_bound": ("kinetic_time", lambda t: frequency_bound(t, rule)),
        "frequency_hydraulic_bound": ("poroelastic_time", lambda t: frequency_bound(t, rule, mode)),
    }
    return compute, mirrors


def _missing_reasons(
    s: dict[str, Any],
    vals: dict[str, np.ndarray],
    absent: dict[str, np.ndarray],
    t_reason: np.ndarray,
) -> dict[str, np.ndarray]:
    """Per output key, why a value is missing (empty where it is not)."""
    model = s["permeability_model"]
    spec = PERMEABILITY_MODELS[model]
    fallback = s["modulus_fallback"]
    phi_out = np.array(
        [
            f"filament_volume_fraction {number(p)} outside ({spec.phi_min:g}, {spec.phi_max:.4g}] "
            f"of {model}"
            if np.isfinite(p) and not (spec.phi_min < p <= spec.phi_max)
            else ""
            for p in vals["filament_volume_fraction"]
        ],
        dtype=object,
    )
    r_d10 = absent["lattice_spacing_d10"]
    r_kest = join_reasons(r_d10, phi_out)
    r_k = np.where(
        (absent["permeability"] == "") | (r_kest == ""),
        "",
        "no permeability, and permeability_est: " + r_kest,
    )
    r_eta = np.where(
        (absent["fluid_viscosity"] == "") | (t_reason == ""),
        "",
        "no fluid_viscosity, and " + t_reason,
    )
    if fallback == "none":
        r_m = np.where(
            absent["transverse_modulus"] == "",
            "",
            "no transverse_modulus (modulus_fallback = none)",
        )
    else:
        r_m = np.where(
            (absent["transverse_modulus"] == "") | (absent["elastic_modulus"] == ""),
            "",
            "no transverse_modulus or elastic_modulus",
        )
    r_d = join_reasons(r_k, r_m, r_eta)
    r_tp = join_reasons(absent["length"], r_d)
    rates = join_reasons(absent["attach_rate"], absent["detach_rate"])
    r_tx = np.where(
        (absent["kinetic_time"] == "") | (rates == ""),
        "",
        absent["kinetic_time"] + ", and 1/(f+g): " + rates,
    )
    reasons = {
        "filament_spacing": r_d10,
        "filament_volume_fraction": r_d10,
        "permeability_est": r_kest,
        "fluid_viscosity_est": t_reason,
        "drained_modulus": r_m,
        "poroelastic_diffusivity": r_d,
        "poroelastic_time": r_tp,
        "kinetic_time": r_tx,
        "poro_kinetic_ratio": join_reasons(r_tp, r_tx),
        "frequency_kinetic_bound": r_tx,
        "frequency_hydraulic_bound": r_tp,
        "frequency_ratio": join_reasons(absent["frequency_observed"], r_tx, r_tp),
        "regime": join_reasons(r_tx, r_tp),
    }

    return reasons


def _routes(
    s: dict[str, Any],
    leaves: dict[str, np.ndarray],
    vals: dict[str, np.ndarray],
    thin_per_thick: np.ndarray,
    temperature: np.ndarray,
    length_key: str,
) -> dict[str, Any]:
    """Per output key, the route by which it was computed (the ``_method`` column)."""
    model = s["permeability_model"]
    fallback = s["modulus_fallback"]
    nu = float(s["poisson_ratio"])
    rule = s["frequency_bound"]
    mode = float(s["hydraulic_mode_factor"])
    k_route = np.where(
        ~np.isnan(leaves["permeability"]), "k = permeability", f"k = permeability_est ({model})"
    )
    m_fb_text = {
        "elastic_modulus": "M = elastic_modulus",
        "constrained": f"M = constrained from elastic_modulus (nu {nu:g})",
        "none": "",
    }[fallback]
    m_route = np.where(~np.isnan(leaves["transverse_modulus"]), "M = transverse_modulus", m_fb_text)
    f_cyto = s["cytosol_viscosity_factor"]
    eta_route = np.where(
        ~np.isnan(leaves["fluid_viscosity"]),
        "eta = fluid_viscosity",
        f"eta = fluid_viscosity_est (water x {f_cyto:g})",
    )
    d_route = np.char.add(
        np.char.add(np.char.add(np.char.add(k_route, "; "), m_route), "; "), eta_route
    )
    bound_txt = "1/(2 pi tau)" if rule == "corner" else "1/tau"
    methods = {
        "filament_spacing": "hexagonal lattice d = 2 d10/sqrt(3)",
        "filament_volume_fraction": [
            f"hexagonal lattice, r_thick {s['thick_filament_radius_nm']:g} nm, r_thin "
            f"{s['thin_filament_radius_nm']:g} nm, {number(t)} thin per thick"
            for t in thin_per_thick
        ],
        "permeability_est": f"{model}, a = {s['effective_radius']} radius",
        "fluid_viscosity_est": [
            f"IAPWS R12-08 water at {number(t)} C and 0.1 MPa, x {f_cyto:g}" for t in temperature
        ],
        "drained_modulus": m_route,
        "poroelastic_diffusivity": d_route,
        "poroelastic_time": np.char.add(f"l = {length_key}; ", d_route),
        "kinetic_time": np.where(
            ~np.isnan(leaves["kinetic_time"]), "reported", "two-state 1/(f+g)"
        ),
        "poro_kinetic_ratio": "poroelastic_time / kinetic_time",
        "frequency_kinetic_bound": f"{bound_txt}, tau = kinetic_time",
        "frequency_hydraulic_bound": (f"{mode:g} x " if mode != 1 else "")
        + f"{bound_txt}, tau = poroelastic_time",
        "frequency_ratio": np.where(
            vals["_regime_score"] < 1,
            "frequency_observed / frequency_hydraulic_bound",
            "frequency_observed / frequency_kinetic_bound",
        ),
        "regime": "the smaller frequency bound limits",
    }

    return methods


def _assemble(
    keys: dict,
    prop,
    lv: _Leaves,
    names: dict[str, str],
    reasons: dict,
    methods: dict,
    mc: int,
    mode: float = 1.0,
) -> tuple[dict[str, Any], dict[str, str]]:
    """The new columns (values and uncertainty in the units of derived.toml, lineage, Monte
    Carlo summaries, the regime) and the unit of each added key."""
    from comparo.base.units import conversion_factor

    leaves, rel_u, basis, obs = lv.values, lv.rel_u, lv.basis, lv.obs
    vals = prop.values
    display = {leaf: names.get(leaf, leaf) for leaf in leaves}
    new: dict[str, Any] = {}
    units: dict[str, str] = {}
    lineage_cache: dict[str, Any] = {}
    for key in _SI:
        unit = keys[key]["unit"]
        units[key] = unit
        f = conversion_factor(_SI[key], unit)
        y = vals[key]
        u = prop.u[key]
        if key == "kinetic_time":  # a reported kinetic time passes through with its own uncertainty
            rep = ~np.isnan(leaves["kinetic_time"])
            u = np.where(rep, leaves["kinetic_time"] * rel_u["kinetic_time"], u)
        through = {"kinetic_time": "kinetic_time", "drained_modulus": "transverse_modulus"}.get(key)
        cols = lineage_columns(
            key,
            y,
            prop,
            basis,
            obs,
            display,
            reasons[key],
            methods[key],
            cache=lineage_cache,
            passthrough=(through, leaves[through], basis[through]) if through else None,
        )
        cols = {key: y * f, f"{key}_u": u * f, **cols}
        if mc > 0:
            cols.update(mc_columns(key, prop.mc[key], cols[f"{key}_u"], f))
        new.update(cols)
    score = vals["_regime_score"]
    mcs = prop.mc if mc > 0 else {}
    pi_mc, fr_mc = mcs.get("poro_kinetic_ratio", {}), mcs.get("frequency_ratio", {})
    regime = classify_regime(
        vals["poro_kinetic_ratio"],
        prop.u["poro_kinetic_ratio"],
        mode,
        pi_mc.get("_mc_lo95"),
        pi_mc.get("_mc_hi95"),
    )
    regime[~np.isfinite(score)] = None
    route = "Monte Carlo 95% interval" if mc > 0 else "first-order 95% interval"
    how = (
        f"the smaller frequency bound limits; undetermined when the {route} of poro_kinetic_ratio "
        f"holds {mode:g}"
    )
    no_u = np.isfinite(score) & ~np.isfinite(prop.u["poro_kinetic_ratio"])
    reg_method = np.where(no_u, how + " (no uncertainty of poro_kinetic_ratio: undetermined)", how)
    reg = lineage_columns(
        "_regime_score",
        score,
        prop,
        basis,
        obs,
        display,
        reasons["regime"],
        reg_method,
        cache=lineage_cache,
    )
    new["regime"] = regime
    new.update({c.replace("_regime_score", "regime"): v for c, v in reg.items()})
    units["regime"] = "dimensionless"
    new["frequency_vs_bound"] = frequency_vs_bound(
        vals["frequency_ratio"],
        prop.u["frequency_ratio"],
        fr_mc.get("_mc_lo95"),
        fr_mc.get("_mc_hi95"),
    )

    return new, units
