"""Reference checks of comparo.derivation against standards, published values and
independent libraries (iapws, uncertainties, scipy, pint).

Each test's docstring names its source; "from memory" marks a value recalled
without a checked copy of the source.
"""

from __future__ import annotations

import importlib
import math

import numpy as np
import pandas as pd
import pytest

# the package of the derivation (comparo.derive is its function derive)
dv = importlib.import_module("comparo.derivation")


# ------------------------------------------------------------------ water


@pytest.mark.parametrize("t_c", [5.0, 10.0, 20.0, 25.0, 30.0, 37.0])
def test_water_viscosity_matches_iapws_package(t_c):
    """IAPWS R12-08 viscosity of liquid water at 0.1 MPa against the `iapws` package
    (reference implementation of IAPWS-95 + R12-08), within 1e-5 relative."""
    iapws = pytest.importorskip("iapws")
    ref = iapws.IAPWS95(T=273.15 + t_c, P=0.1).mu  # Pa s
    assert float(dv.water_viscosity_at(t_c)) == pytest.approx(ref, rel=1e-5)


@pytest.mark.parametrize(
    "t_c, mpas",
    [
        (5.0, 1.518175),
        (10.0, 1.305901),
        (20.0, 1.001597),
        (25.0, 0.890023),
        (30.0, 0.797222),
        (37.0, 0.691303),
    ],
)
def test_water_viscosity_tabulated(t_c, mpas):
    """Values of iapws.IAPWS95(T, P=0.1).mu printed in the project's METHODS check table
    (computed with iapws 1.5.5), mPa s, within 1e-5 relative."""
    assert float(dv.water_viscosity_at(t_c)) * 1e3 == pytest.approx(mpas, rel=1e-5)


@pytest.mark.parametrize(
    "temp_k, rho, mu_upas",
    [
        (298.15, 998.0, 889.735100),
        (298.15, 1200.0, 1437.649467),
        (373.15, 1000.0, 307.883622),
        (433.15, 1.0, 14.538324),
        (433.15, 1000.0, 217.685358),
        (873.15, 1.0, 32.619287),
        (873.15, 100.0, 35.802262),
        (873.15, 600.0, 77.430195),
        (1173.15, 1.0, 44.217245),
        (1173.15, 100.0, 47.640433),
        (1173.15, 400.0, 64.154608),
    ],
)
def test_r12_08_table4(temp_k, rho, mu_upas):
    """IAPWS R12-08 (2008), Table 4: computer-program verification values of the
    viscosity without critical enhancement, µPa s (values from memory; each equals
    `iapws._iapws._Viscosity(rho, T)` to the printed digits)."""
    assert float(dv.water_viscosity(rho, temp_k)) * 1e6 == pytest.approx(mu_upas, abs=1.5e-6)


@pytest.mark.parametrize(
    "temp_k, p_mpa, v",
    [(300.0, 3.0, 0.100215168e-2), (300.0, 80.0, 0.971180894e-3), (500.0, 3.0, 0.120241800e-2)],
)
def test_if97_region1_verification(temp_k, p_mpa, v):
    """IAPWS R7-97 (IF97), Table 5: specific volume in region 1, m3/kg (from memory;
    the first value is also the docstring example of iapws.iapws97._Region1)."""
    assert 1.0 / float(dv.water_density(temp_k, p_mpa)) == pytest.approx(v, rel=1e-8)


def test_water_density_matches_iapws97():
    """Density of liquid water at 0.1 MPa, 5-37 C, against iapws.IAPWS97 (reference
    implementation of IF97), 1e-9 relative."""
    iapws = pytest.importorskip("iapws")
    for t in (5.0, 20.0, 37.0):
        ref = iapws.IAPWS97(T=273.15 + t, P=0.1).rho
        assert float(dv.water_density(273.15 + t, 0.1)) == pytest.approx(ref, rel=1e-9)


# ------------------------------------------------------------ uncertainty


def _methods_example_table(**over):
    """tau = l^2 eta/(kM): l 20 +- 1 um, k (5.0 +- 1.0)e-18 m^2, M 100 +- 10 kPa at 37 C."""
    row = {
        "taxon": "X",
        "temperature_c": 37.0,
        "fiber_radius": 20.0,
        "fiber_radius_u": 1.0,
        "fiber_radius_basis": "reported",
        "fiber_radius_obs": "a",
        "permeability": 5.0,
        "permeability_u": 1.0,
        "permeability_basis": "reported",
        "permeability_obs": "b",
        "transverse_modulus": 100.0,
        "transverse_modulus_u": 10.0,
        "transverse_modulus_basis": "reported",
        "transverse_modulus_obs": "c",
    }
    row.update(over)
    return pd.DataFrame([row])


def test_gum_worked_example():
    """Project METHODS §6 worked example (computed): D = 7.2327e-10 m^2/s, tau = 0.55304 s,
    relative u sqrt(0.1^2 + 0.2^2 + 0.1^2) = 0.24495, u = 0.13547 s (JCGM 100:2008, 5.1.6);
    the viscosity is taken exact here."""
    out = dv.derive(_methods_example_table(), {"water_viscosity_rel_u": 0.0})
    assert out["poroelastic_diffusivity"].iloc[0] * 1e-12 == pytest.approx(7.2327e-10, rel=1e-4)
    assert out["poroelastic_time"].iloc[0] == pytest.approx(0.55304, rel=1e-4)
    assert out["poroelastic_time_u"].iloc[0] == pytest.approx(0.13547, rel=1e-4)


def test_gum_worked_example_against_uncertainties_package():
    """The same example through `uncertainties.ufloat` (independent linear propagation)."""
    unc = pytest.importorskip("uncertainties")
    eta = float(dv.water_viscosity_at(37.0))
    length, k, m = unc.ufloat(20e-6, 1e-6), unc.ufloat(5e-18, 1e-18), unc.ufloat(1e5, 1e4)
    ref = length**2 * eta / (k * m)
    out = dv.derive(_methods_example_table(), {"water_viscosity_rel_u": 0.0})
    assert out["poroelastic_time"].iloc[0] == pytest.approx(ref.nominal_value, rel=1e-9)
    assert out["poroelastic_time_u"].iloc[0] == pytest.approx(ref.std_dev, rel=1e-9)


def test_monte_carlo_worked_example():
    """Project METHODS §6 (computed): default_rng(20240601), 10^6 normal draws of l, k, M in
    that order, eta exact: mean 0.5858, median 0.5579, sd 0.1634, 2.5-97.5% 0.3586-0.9772;
    tolerance 2% (JCGM 101:2008 Monte Carlo)."""
    rng = np.random.default_rng(20240601)
    s = dv.sample_inputs(
        {"l": [20e-6], "k": [5e-18], "M": [1e5]},
        {"l": [1e-6], "k": [1e-18], "M": [1e4]},
        1_000_000,
        rng,
        distribution="normal",
    )
    tau = dv.poroelastic_time(s["l"], s["k"], s["M"], 0.6913035e-3)[0]
    assert tau.mean() == pytest.approx(0.5858, rel=0.02)
    assert np.median(tau) == pytest.approx(0.5579, rel=0.02)
    assert tau.std(ddof=1) == pytest.approx(0.1634, rel=0.02)
    lo, hi = np.quantile(tau, [0.025, 0.975])
    assert lo == pytest.approx(0.3586, rel=0.02)
    assert hi == pytest.approx(0.9772, rel=0.02)


def test_monte_carlo_agrees_with_gum_when_nearly_linear():
    """JCGM 101:2008: for a near-linear model (1-2% relative inputs) the MC standard
    uncertainty and the GUM one agree; 20,000 draws give a sd within about 1% (MC error
    of an sd ~ 1/sqrt(2M)), so 2% is the tolerance."""
    tab = _methods_example_table(fiber_radius_u=0.2, permeability_u=0.1, transverse_modulus_u=1.0)
    out = dv.derive(tab, {"water_viscosity_rel_u": 0.0}, mc=20_000, seed=3)
    for key in ("poroelastic_time", "poroelastic_diffusivity", "frequency_hydraulic_bound"):
        assert out[f"{key}_mc_u"].iloc[0] == pytest.approx(out[f"{key}_u"].iloc[0], rel=0.02)
        assert out[f"{key}_mc_median"].iloc[0] == pytest.approx(out[key].iloc[0], rel=0.01)
        assert not out[f"{key}_nonlinear"].iloc[0]


def test_monte_carlo_flags_the_skewed_worked_example():
    """With the METHODS §6 inputs (20% on k) the lognormal MC is right-skewed: the 97.5%
    point lies farther above the median than the 2.5% point below it (JCGM 101:2008)."""
    out = dv.derive(_methods_example_table(), mc=20_000, seed=1)
    med = out["poroelastic_time_mc_median"].iloc[0]
    assert out["poroelastic_time_mc_hi95"].iloc[0] - med > 1.2 * (
        med - out["poroelastic_time_mc_lo95"].iloc[0]
    )


def test_gum_ratios_against_uncertainties_package():
    """Random products, quotients and powers: first-order GUM of a user ratio equals the
    linear propagation of the `uncertainties` package to 1e-9 relative."""
    unc = pytest.importorskip("uncertainties")
    rng = np.random.default_rng(7)
    n = 25
    keys = ["fiber_length", "fiber_radius", "body_mass", "muscle_mass"]
    tab = {"taxon": [f"t{i}" for i in range(n)]}
    for k in keys:
        tab[k] = rng.uniform(0.5, 50.0, n)
        tab[f"{k}_u"] = tab[k] * rng.uniform(0.01, 0.4, n)
    tab = pd.DataFrame(tab)
    exprs = {
        "r1": "fiber_length / fiber_radius",
        "r2": "fiber_length^2 * body_mass / muscle_mass^0.5",
        "r3": "(fiber_radius * muscle_mass)^(-1/3) / body_mass^1.5",
        "r4": "2.5 * (fiber_length / (body_mass * fiber_radius))^2",
    }
    out = dv.derive(tab, {"ratios": exprs})
    # pint: fiber_length mm, fiber_radius um -> r1 dimensionless (factor 1000)
    for i in range(n):
        u = {k: unc.ufloat(tab[k][i], tab[f"{k}_u"][i]) for k in keys}
        refs = {
            "r1": u["fiber_length"] * 1e-3 / (u["fiber_radius"] * 1e-6),
            "r2": (u["fiber_length"] * 1e-3) ** 2 * u["body_mass"] / u["muscle_mass"] ** 0.5,
            "r3": (u["fiber_radius"] * 1e-6 * u["muscle_mass"]) ** (-1 / 3) / u["body_mass"] ** 1.5,
            "r4": 2.5
            * (u["fiber_length"] * 1e-3 / (u["body_mass"] * u["fiber_radius"] * 1e-6)) ** 2,
        }
        for name, ref in refs.items():
            assert out[name].iloc[i] == pytest.approx(ref.nominal_value, rel=1e-9)
            assert out[f"{name}_u"].iloc[i] == pytest.approx(ref.std_dev, rel=1e-9)


def test_gum_relative_against_uncertainties_package():
    """gum_relative: (u_y/y)^2 = sum (p_i u_i/x_i)^2 (JCGM 100:2008, 5.1.6) against
    `uncertainties` on random power products, 1e-9 relative."""
    unc = pytest.importorskip("uncertainties")
    rng = np.random.default_rng(11)
    for _ in range(20):
        x = rng.uniform(0.1, 10.0, 3)
        u = x * rng.uniform(0.01, 0.3, 3)
        p = rng.uniform(-3, 3, 3)
        y = math.prod(unc.ufloat(a, b) ** q for a, b, q in zip(x, u, p, strict=True))
        rel = dv.gum_relative(
            dict(zip("abc", p, strict=True)), dict(zip("abc", u / x, strict=True))
        )
        assert float(rel) == pytest.approx(y.std_dev / y.nominal_value, rel=1e-9)


# ---------------------------------------------------------- permeability


@pytest.mark.parametrize(
    "phi, par, tra, jj",
    [
        (0.1, 2.493963, 1.652984, 2.057378),
        (0.2, 0.611797, 0.428976, 0.508828),
        (0.3, 0.215811, 0.153796, 0.136486),
    ],
)
def test_permeability_models_tabulated(phi, par, tra, jj):
    """k/a^2 of Happel (1959, AIChE J 5:174-177) parallel and transverse and of Jackson &
    James (1986, Can J Chem Eng 64:364-374), as computed in the project's METHODS §8
    (the transverse and Jackson-James formulas there are from memory); 1e-6."""
    assert float(dv.permeability(1.0, phi, "happel_parallel")) == pytest.approx(par, abs=1e-6)
    assert float(dv.permeability(1.0, phi, "happel_transverse")) == pytest.approx(tra, abs=1e-6)
    assert float(dv.permeability(1.0, phi, "jackson_james")) == pytest.approx(jj, abs=1e-6)


@pytest.mark.parametrize("phi", [0.05, 0.2, 0.4, 0.7])
def test_permeability_formulas_by_hand(phi):
    """Happel (1959) eq. for flow along cylinders, k = a^2/(4 phi)(-ln phi - 3/2 + 2 phi -
    phi^2/2); across, k = a^2/(8 phi)(-ln phi - (1 - phi^2)/(1 + phi^2)); Kozeny-Carman
    (Carman 1937, Trans IChemE 15:150-166) k = a^2 (1 - phi)^3/(4 K phi^2), K = 5."""
    a = 3.0
    lnp = math.log(phi)
    assert float(dv.permeability(a, phi, "happel_parallel")) == pytest.approx(
        a * a / (4 * phi) * (-lnp - 1.5 + 2 * phi - phi * phi / 2), rel=1e-12
    )
    assert float(dv.permeability(a, phi, "happel_transverse")) == pytest.approx(
        a * a / (8 * phi) * (-lnp - (1 - phi * phi) / (1 + phi * phi)), rel=1e-12
    )
    assert float(dv.permeability(a, phi, "kozeny_carman")) == pytest.approx(
        a * a * (1 - phi) ** 3 / (4 * 5.0 * phi * phi), rel=1e-12
    )


@pytest.mark.parametrize("phi", [0.05, 0.2, 0.5])
def test_happel_parallel_from_cell_model_integration(phi):
    """Happel's (1959) free-surface cell model, solved independently: axial Stokes flow
    in the annulus a < r < b (phi = a^2/b^2) with no slip at r = a and no shear at r = b,
    w(r) = G/(4 mu) [a^2 - r^2 + 2 b^2 ln(r/a)]; k = mu Q/(G pi b^2), Q by scipy quad."""
    from scipy.integrate import quad

    a, g_mu = 1.0, 1.0
    b = a / math.sqrt(phi)
    q, _ = quad(
        lambda r: 2 * math.pi * r * g_mu / 4 * (a * a - r * r + 2 * b * b * math.log(r / a)), a, b
    )
    k = q / (math.pi * b * b) / g_mu
    assert float(dv.permeability(a, phi, "happel_parallel")) == pytest.approx(k, rel=1e-9)


def test_permeability_limits():
    """Limiting behaviour: the cell models vanish as phi -> 1 (Happel 1959), Gebart's
    transverse relation at hexagonal close packing phi = pi/(2 sqrt 3) (Gebart 1992, J
    Compos Mater 26:1100-1133, from memory); dilute Happel parallel k/a^2 -> (-ln phi - 3/2)/(4
    phi)."""
    near = 1 - 1e-6
    for model in ("happel_parallel", "happel_transverse", "kuwabara_transverse"):
        spec = dv.PERMEABILITY_MODELS[model]
        k = dv.permeability(1.0, np.array([0.5, 0.8, min(near, spec.phi_max)]), model)
        assert np.all(np.diff(k) < 0)
    assert float(dv.permeability_models._happel_parallel(near)) < 1e-12
    assert float(dv.permeability_models._happel_transverse(near)) < 1e-11
    pmax = dv.HEXAGONAL_PACKING_LIMIT
    assert float(dv.permeability(1.0, pmax * (1 - 1e-6), "gebart_transverse")) < 1e-13
    for phi in (1e-4, 1e-6, 1e-8):
        ratio = (
            float(dv.permeability(1.0, phi, "happel_parallel")) * 4 * phi / (-math.log(phi) - 1.5)
        )
        assert ratio == pytest.approx(1.0, abs=3 * phi)
    assert np.isnan(dv.permeability(1.0, 0.35, "jackson_james"))  # outside its stated range
    assert np.isnan(dv.permeability(1.0, 0.95, "happel_parallel"))  # beyond close packing


# --------------------------------------------------------------- lattice


def test_hexagonal_lattice_by_hand():
    """Hexagonal lattice (Millman 1998, Physiol Rev 78:359-391; relation from memory):
    d10 = (sqrt 3/2) d. By hand: d10 = 37 nm -> d = 74/sqrt 3 = 42.7239 nm; A = (sqrt 3/2)
    d^2 = 1580.785 nm^2; phi(r_thick 8, r_thin 5 nm) = pi (64 + 2*25)/A = 0.22656 (2 thin
    per thick), 0.27624 (3); a_eff = sum r^2/sum r = 114/18 = 6.3333 nm (common practice)."""
    d = dv.filament_spacing(37.0)
    assert d == pytest.approx(42.7239, abs=1e-4)
    assert math.sqrt(3) / 2 * d == pytest.approx(37.0, rel=1e-14)
    assert dv.unit_cell_area(d) == pytest.approx(1580.785, abs=1e-3)
    assert dv.filament_volume_fraction(37.0, 8.0, 5.0, 2) == pytest.approx(0.22656, abs=1e-5)
    assert dv.filament_volume_fraction(37.0, 8.0, 5.0, 3) == pytest.approx(0.27624, abs=1e-5)
    assert dv.thick_thin_distance(37.0) == pytest.approx(d / math.sqrt(3), rel=1e-14)
    assert dv.effective_radius(8.0, 5.0, 2) == pytest.approx(6.3333, abs=1e-4)


def test_lattice_permeability_example():
    """Project METHODS §8 (computed): d10 37 nm, 1 thick (8 nm) + 2 thin (5 nm), a_eff
    6.3333 nm -> Happel k parallel 18.25 nm^2, transverse 12.89 nm^2."""
    phi = dv.filament_volume_fraction(37.0, 8.0, 5.0, 2)
    a = dv.effective_radius(8.0, 5.0, 2)
    assert float(dv.permeability(a, phi, "happel_parallel")) == pytest.approx(18.25, abs=0.006)
    assert float(dv.permeability(a, phi, "happel_transverse")) == pytest.approx(12.89, abs=0.006)
    tab = pd.DataFrame(
        {"taxon": ["x"], "lattice_spacing_d10": [37.0], "lattice_spacing_d10_u": [0.0]}
    )
    out = dv.derive(tab)
    assert out["permeability_est"].iloc[0] == pytest.approx(18.25, abs=0.006)


# ----------------------------------------------------- modes, kinetics


def test_first_bessel_zero():
    """j01^2 against scipy.special.jn_zeros (independent library) and 5.783186."""
    from scipy.special import jn_zeros

    assert dv.J01_SQUARED == pytest.approx(jn_zeros(0, 1)[0] ** 2, rel=1e-14)
    assert dv.J01_SQUARED == pytest.approx(5.783186, abs=1e-6)


def test_huxley_two_state_time_and_ratio():
    """Huxley (1957, Prog Biophys Biophys Chem 7:255-318): dn/dt = f(1-n) - g n relaxes at
    f + g; f 65, g 15 1/s -> 12.5 ms; with tau_p 0.55304 s, Pi = 44.243 (METHODS §8)."""
    from scipy.integrate import solve_ivp

    f, g = 65.0, 15.0
    assert dv.kinetic_time_two_state(f, g) == pytest.approx(0.0125, rel=1e-12)
    sol = solve_ivp(lambda t, n: f * (1 - n) - g * n, (0, 0.0125), [0.0], rtol=1e-10, atol=1e-12)
    n_ss = f / (f + g)
    assert sol.y[0, -1] == pytest.approx(n_ss * (1 - math.exp(-1)), rel=1e-6)
    tab = _methods_example_table(
        attach_rate=65.0, attach_rate_u=0.0, detach_rate=15.0, detach_rate_u=0.0
    )
    out = dv.derive(tab)
    assert out["kinetic_time"].iloc[0] == pytest.approx(0.0125, rel=1e-12)
    assert out["poro_kinetic_ratio"].iloc[0] == pytest.approx(44.243, rel=1e-4)
    assert out["regime"].iloc[0] == "hydraulic"


def test_constrained_modulus():
    """M = E(1 - nu)/((1 + nu)(1 - 2 nu)) (Wang 2000, Theory of Linear Poroelasticity; from
    memory): M/E = 1.34615 at nu = 0.3 (METHODS §8)."""
    assert dv.constrained_modulus(1.0, 0.3) == pytest.approx(1.34615, abs=1e-5)


# ------------------------------------------------------------ dimensions


def test_dimensions_through_pint():
    """Dimensional sanity with pint quantities through the same functions derive() uses:
    times in seconds, diffusivity m^2/s, bounds in Hz, ratios dimensionless. Dropping any
    factor (e.g. eta) from a formula would leave a non-time dimension and fail here."""
    from comparo.base.units import registry

    ureg = registry()
    length, k = 20 * ureg.um, dv.permeability(6.3 * ureg.nm, 0.2)
    m, eta = 100 * ureg.kPa, 0.7 * ureg.mPa * ureg.s
    tau_p = dv.poroelastic_time(length, k, m, eta)
    assert tau_p.dimensionality == ureg.s.dimensionality
    assert (
        dv.poroelastic_diffusivity(k, m, eta).dimensionality == (ureg.m**2 / ureg.s).dimensionality
    )
    tau_x = dv.kinetic_time_two_state(65 / ureg.s, 15 / ureg.s)
    assert tau_x.to("ms").magnitude == pytest.approx(12.5)
    assert (tau_p / tau_x).to("dimensionless").dimensionless
    assert dv.frequency_bound(tau_x).to("Hz").magnitude == pytest.approx(1 / (2 * math.pi * 0.0125))
    assert dv.frequency_bound(tau_p, "inverse").dimensionality == ureg.Hz.dimensionality
    assert (
        dv.filament_volume_fraction(37 * ureg.nm, 8 * ureg.nm, 0.005 * ureg.um).to("").dimensionless
    )
    # the derived catalogue's units have the dimension of their kind
    from comparo.base.catalog import read_schema
    from comparo.base.units import dimensionality, parse_unit

    for key, entry in read_schema("derived.toml")["keys"].items():
        assert parse_unit(entry["unit"]).dimensionality == dimensionality(entry["kind"]), key


def test_derive_columns_match_pint_computation():
    """derive() in catalogue units equals the pint computation converted to the units of
    schema/derived.toml (a dropped or doubled unit factor would break this)."""
    from comparo.base.catalog import read_schema
    from comparo.base.units import registry

    ureg = registry()
    units = read_schema("derived.toml")["keys"]
    tab = _methods_example_table(
        attach_rate=40.0,
        detach_rate=10.0,
        frequency_observed=30.0,
        fluid_viscosity=2.0,
        lattice_spacing_d10=40.0,
    )
    out = dv.derive(tab)
    length, k, m = 20 * ureg.um, 5 * ureg.nm**2, 100 * ureg.kPa
    eta = 2 * ureg.mPa * ureg.s
    tau_p = dv.poroelastic_time(length, k, m, eta)
    tau_x = dv.kinetic_time_two_state(40 / ureg.s, 10 / ureg.s)
    f_min = min(dv.frequency_bound(tau_p), dv.frequency_bound(tau_x))
    expect = {
        "poroelastic_time": tau_p,
        "poroelastic_diffusivity": dv.poroelastic_diffusivity(k, m, eta),
        "kinetic_time": tau_x,
        "frequency_kinetic_bound": dv.frequency_bound(tau_x),
        "frequency_hydraulic_bound": dv.frequency_bound(tau_p),
        "frequency_ratio": 30 * ureg.Hz / f_min,
        "poro_kinetic_ratio": tau_p / tau_x,
        "filament_spacing": dv.filament_spacing(40 * ureg.nm),
    }
    for key, q in expect.items():
        assert out[key].iloc[0] == pytest.approx(q.to(units[key]["unit"]).magnitude, rel=1e-12), key
