"""Generate the synthetic demo compilation ``demo_tables/synthetic_cyclers/``.

Everything here is INVENTED: the taxa, clades, sources and numbers are a
scenario of our own, drawn from stated scaling laws with noise by a seeded
random generator, to show what comparo does. None of it is a measurement.

The scenario: 60 fictional taxa in 6 fictional clades, body masses from 1 mg
to ~100 kg; observed cycle frequency falls with mass as M^-0.2 (clade offsets
added); fiber radius grows as M^0.08. Each taxon's two frequency bounds are
set relative to its true cycle frequency (at 25 °C):

* kinetic bound (f + g)/(2 pi) = frequency x 10^N(0.3, 0.12): cross-bridges
  cycle about twice as fast as the animal drives them; detach/attach 10^N(0.4, 0.1);
* hydraulic bound 1/(2 pi tau_p) = frequency x 10^(0.3 + clade + N(0, 0.25)),
  clade offsets N(0, 0.15); the transverse (drained) modulus M is the value
  that gives this bound through tau_p = l^2 eta/(k M), with l the fiber radius,
  k the Happel (1959) parallel-flow permeability of the hexagonal lattice
  (thick 8 nm, thin 5 nm, 2 thin per thick) and eta water at 25 °C;
  the longitudinal modulus is M x 10^N(0.2, 0.1).

So about half the taxa come out kinetic-limited and half hydraulic-limited,
poroelastic/kinetic ratios span roughly 0.2-5, and most observed frequencies
lie below both bounds. The true (generating) values per taxon are written to
``truth.csv`` (:func:`truth_rows`); reported values scatter around them as
their stated uncertainties say. Rates and frequencies are reported at
measurement temperatures of 10-35 °C (true values at 25 °C scaled with
Q10 = 2.5 for rates, 2.0 for frequencies); units are mixed as in real
compilations.

Planted curation faults (comparo must find each one; see tests/test_demo.py):
  * a unit slip: one fiber radius typed in mm but labelled um     (obs_id DEMO-SLIP)
  * two conflicting frequencies for one taxon from two sources    (DEMO-CONFLICT-A/B)
  * an exact duplicate row (same source, locator, value) typed twice (DEMO-DUP)
  * a proxy value borrowed from a related taxon                   (DEMO-PROXY)
  * several values read off figures (basis = digitized)
  * one rate without a measurement temperature                    (DEMO-NOTEMP)

Run ``python demo_tables/generate.py`` to recreate the files byte for byte
(``--check`` compares instead of writing).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

SEED = 20261202
HERE = Path(__file__).resolve().parent
OUT = HERE / "synthetic_cyclers"

CLADES = ["Alatoria", "Sonifera", "Tremulida", "Natatoria", "Stridulida", "Saltatoria"]
GENERA = [
    "Velocimyia", "Pulsifex", "Vibrathorax", "Ictopteron", "Crebrodes", "Tinnulus", "Celerina",
    "Oscillaria", "Fremitor", "Rapidonta", "Quassator", "Sonoptera",
]
EPITHETS = [
    "ficta", "inventa", "simulata", "fabricata", "imaginaria", "commenticia", "fictilis",
    "synthetica", "exempli", "putativa",
]
Q10 = {"attach_rate": 2.5, "detach_rate": 2.5, "kinetic_time": 2.5, "frequency_observed": 2.0}
T_REF = 25.0
# the synthetic world's lattice and fluid (the defaults of schema/derived.toml)
R_THICK_NM, R_THIN_NM, THIN_PER_THICK = 8.0, 5.0, 2
ETA_25C = 0.890023e-3  # Pa s, water at 25 °C and 0.1 MPa (IAPWS R12-08, via iapws 1.5.5)


def lattice_permeability_nm2(d10_nm):
    """Happel (1959, AIChE J 5:174-177) parallel-flow permeability (nm²) of the
    hexagonal filament lattice of spacing d10: phi = pi(r_m² + 2 r_a²)/((sqrt 3/2) d²),
    d = 2 d10/sqrt 3, a = (r_m² + 2 r_a²)/(r_m + 2 r_a)."""
    d = 2.0 * np.asarray(d10_nm, dtype=float) / np.sqrt(3.0)
    s2 = R_THICK_NM**2 + THIN_PER_THICK * R_THIN_NM**2
    phi = np.pi * s2 / (np.sqrt(3.0) / 2.0 * d**2)
    a = s2 / (R_THICK_NM + THIN_PER_THICK * R_THIN_NM)
    return a**2 / (4.0 * phi) * (-np.log(phi) - 1.5 + 2.0 * phi - 0.5 * phi**2)


def g(x: float, digits: int = 4) -> str:
    """A number as a curator would type it: `digits` significant digits, plain text."""
    return f"{float(x):.{digits}g}"


def make(rng: np.random.Generator) -> dict[str, str]:
    n_taxa = 60
    # --- taxa: clade, name, tree label ------------------------------------------------
    names, clades = [], []
    used = set()
    for i in range(n_taxa):
        clade = CLADES[i % len(CLADES)]
        while True:
            name = f"{GENERA[int(rng.integers(len(GENERA)))]} {EPITHETS[int(rng.integers(len(EPITHETS)))]}"
            if name not in used:
                break
        used.add(name)
        names.append(name)
        clades.append(clade)
    order = np.argsort(np.array(clades), kind="stable")
    names = [names[i] for i in order]
    clades = [clades[i] for i in order]

    # --- true per-taxon values (at 25 °C) ----------------------------------------------
    logm = rng.uniform(-6.0, 2.0, n_taxa)  # log10 kg: 1 mg to 100 kg
    offset = {c: v for c, v in zip(CLADES, rng.normal(0.0, 0.12, len(CLADES)), strict=True)}
    clade_off = np.array([offset[c] for c in clades])
    m = 10**logm
    freq = 30.0 * m**-0.2 * 10 ** (clade_off + rng.normal(0, 0.06, n_taxa))  # Hz
    radius = 25.0 * m**0.08 * 10 ** rng.normal(0, 0.05, n_taxa)  # µm
    length = 8.0 * m**0.25 * 10 ** rng.normal(0, 0.1, n_taxa)  # mm
    d10 = rng.normal(42.0, 3.0, n_taxa)  # nm
    sl = rng.normal(2.6, 0.25, n_taxa)  # µm
    # frequency bounds relative to the true frequency (the generating parameters)
    kin_margin = rng.normal(0.3, 0.12, n_taxa)  # log10(kinetic bound / frequency)
    hyd_clade = {c: v for c, v in zip(CLADES, rng.normal(0.0, 0.15, len(CLADES)), strict=True)}
    hyd_margin = 0.3 + np.array([hyd_clade[c] for c in clades]) + rng.normal(0, 0.25, n_taxa)
    f_kin = freq * 10**kin_margin  # Hz
    f_hyd = freq * 10**hyd_margin  # Hz
    tau_x = 1.0 / (2.0 * np.pi * f_kin)  # s
    tau_p = 1.0 / (2.0 * np.pi * f_hyd)  # s
    k_m2 = lattice_permeability_nm2(d10) * 1e-18
    e_trans = (radius * 1e-6) ** 2 * ETA_25C / (k_m2 * tau_p) / 1e3  # kPa: M = l² eta/(k tau_p)
    e_long = e_trans * 10 ** rng.normal(0.2, 0.1, n_taxa)  # kPa
    g_over_f = 10 ** rng.normal(0.4, 0.1, n_taxa)
    f_att = 1.0 / (tau_x * (1.0 + g_over_f))  # 1/s
    g_det = f_att * g_over_f  # 1/s
    vfrac = np.clip(rng.normal(0.7, 0.08, n_taxa), 0.35, 0.92)
    truth = truth_rows(names, clades, m, freq, radius, d10, e_trans, f_att, g_det, tau_p, tau_x, f_kin, f_hyd)

    # --- sources ------------------------------------------------------------------------
    n_src = 25
    src_ids = [f"SYN{i + 1:02d}" for i in range(n_src)]
    years = rng.integers(1975, 2025, n_src)
    topics = ["fiber morphometry", "X-ray diffraction of the myofilament lattice", "fiber mechanics",
              "cross-bridge kinetics", "in-vivo cycle frequency", "body size survey"]
    sources = ["source_id,citation,year,doi,url,notes"]
    for i, sid in enumerate(src_ids):
        topic = topics[i % len(topics)]
        sources.append(f"{sid},\"Synthetic source {i + 1:02d} ({years[i]}). Invented {topic} study for the comparo demo; synthetic, not a real publication.\",{years[i]},10.99999/comparo.demo.{i + 1:02d},,synthetic")
    # which sources supply which quantity family
    fam = {
        "mass": src_ids[20:25], "morph": src_ids[0:5], "lattice": src_ids[5:9],
        "mech": src_ids[9:13], "kin": src_ids[13:17], "freq": src_ids[17:21],
    }

    rows: list[dict[str, str]] = []

    def add(taxon, quantity, value, unit, source, locator, basis="reported", **extra):
        rows.append({"taxon": taxon, "quantity": quantity, "value": value, "unit": unit, "source_id": source,
                     "locator": locator, "basis": basis, **extra})

    def pick(family):
        return fam[family][int(rng.integers(len(fam[family])))]

    def locator(digitized=False):
        if digitized:
            return f"Fig. {int(rng.integers(1, 8))}{'ABCD'[int(rng.integers(4))]}"
        return f"Table {int(rng.integers(1, 6))}"

    def temp():
        return float(rng.choice([10.0, 15.0, 20.0, 22.0, 25.0, 30.0, 35.0]))

    for i, taxon in enumerate(names):
        # body mass: mixed units
        mu = ["kg", "g", "mg"][0 if logm[i] > 0 else (1 if logm[i] > -3 else 2)]
        scale = {"kg": 1.0, "g": 1e3, "mg": 1e6}[mu]
        add(taxon, "body_mass", g(m[i] * scale), mu, pick("mass"), locator(), n=str(int(rng.integers(3, 30))))
        # fiber radius, or a diameter (converted by comparo and recorded as computed)
        r = radius[i] * 10 ** rng.normal(0, 0.02)
        if rng.random() < 0.25:
            add(taxon, "fiber_diameter", g(2 * r, 3), rng.choice(["um", "µm", "micron"]), pick("morph"), locator(),
                uncertainty=g(0.2 * 2 * r, 2), uncertainty_kind="sd", n=str(int(rng.integers(5, 40))))
        else:
            add(taxon, "fiber_radius", g(r, 3), str(rng.choice(["um", "µm"])), pick("morph"), locator(),
                uncertainty=g(0.05 * r, 2), uncertainty_kind="se", n=str(int(rng.integers(5, 40))))
        if rng.random() < 0.7:
            add(taxon, "fiber_length", g(length[i], 3), "mm", pick("morph"), locator())
        if rng.random() < 0.8:
            dig = rng.random() < 0.2
            add(taxon, "lattice_spacing_d10", g(d10[i], 3), "nm", pick("lattice"), locator(dig),
                basis="digitized" if dig else "reported", uncertainty=g(abs(rng.normal(1.0, 0.3)), 2), uncertainty_kind="sd", n=str(int(rng.integers(3, 12))),
                preparation="intact_fiber")
            add(taxon, "sarcomere_length", g(sl[i], 3), "um", pick("lattice"), locator())
        if rng.random() < 0.7:
            src = pick("mech")
            add(taxon, "elastic_modulus", g(e_long[i] * 1e3, 3), "Pa", src, locator(), preparation="intact_fiber")
            n_m = int(rng.integers(4, 15))
            mt = e_trans[i] * (1.0 + 0.15 / np.sqrt(n_m) * rng.normal())  # sd 15%, n_m fibers
            add(taxon, "transverse_modulus", g(mt / 1e3, 3), "MPa", src, locator(),
                uncertainty=g(0.15 * mt / 1e3, 2), uncertainty_kind="sd", n=str(n_m), preparation="intact_fiber")
        if rng.random() < 0.3:
            add(taxon, "myofibril_volume_fraction", g(vfrac[i], 2), "fraction", pick("morph"), locator())
        if rng.random() < 0.75:
            t = temp()
            dig = rng.random() < 0.15
            src = pick("kin")
            for q, v in (("attach_rate", f_att[i]), ("detach_rate", g_det[i])):
                at_t = v * Q10[q] ** ((t - T_REF) / 10.0) * (1.0 + 0.1 * rng.normal())  # se 10%
                add(taxon, q, g(at_t, 3), str(rng.choice(["1/s", "s^-1"])), src, locator(dig),
                    basis="digitized" if dig else "reported", temperature_c=g(t, 3), preparation="skinned_fiber",
                    uncertainty=g(0.1 * at_t, 2), uncertainty_kind="se", n=str(int(rng.integers(4, 12))))
        t = temp()
        n_f = int(rng.integers(3, 25))
        fo = freq[i] * Q10["frequency_observed"] ** ((t - T_REF) / 10.0) * (1.0 + 0.08 / np.sqrt(n_f) * rng.normal())
        dig = rng.random() < 0.15
        add(taxon, "frequency_observed", g(fo, 3), "Hz", pick("freq"), locator(dig), basis="digitized" if dig else "reported",
            temperature_c=g(t, 3), preparation="in_vivo", uncertainty=g(0.08 * fo, 2), uncertainty_kind="sd", n=str(n_f))

    # --- planted faults -------------------------------------------------------------------
    rows_by = {}
    for k, r in enumerate(rows):
        rows_by.setdefault((r["taxon"], r["quantity"]), k)
    slip_taxon = names[7]
    k = rows_by.get((slip_taxon, "fiber_radius"))
    if k is None:
        add(slip_taxon, "fiber_radius", g(radius[7], 3), "um", pick("morph"), "Table 2")
        k = len(rows) - 1
    # a radius typed in mm (e.g. 0.0231) under the unit um
    rows[k].update(value=g(float(rows[k]["value"]) / 1e3, 3), uncertainty="", uncertainty_kind="", _id="DEMO-SLIP")
    conflict_taxon = names[12]
    k = rows_by[(conflict_taxon, "frequency_observed")]
    rows[k]["_id"] = "DEMO-CONFLICT-A"
    other = [s for s in fam["freq"] if s != rows[k]["source_id"]][0]
    add(conflict_taxon, "frequency_observed", g(float(rows[k]["value"]) * 2.6, 3), "Hz", other, "Table 3",
        temperature_c=rows[k]["temperature_c"], preparation="in_vivo", uncertainty=g(0.05 * float(rows[k]["value"]) * 2.6, 2),
        uncertainty_kind="sd", n="6", _id="DEMO-CONFLICT-B")
    dup = dict(rows[rows_by[(names[20], "body_mass")]])
    dup["_id"] = "DEMO-DUP"
    dup["notes"] = "typed in twice"
    rows.append(dup)
    proxy_taxon, donor = names[30], names[31]
    donor_row = rows[rows_by[(donor, "frequency_observed")]]
    add(proxy_taxon, "lattice_spacing_d10", g(d10[31], 3), "nm", pick("lattice"), "Table 1", basis="proxy", proxy_taxon=donor,
        _id="DEMO-PROXY", notes="lattice spacing of a related taxon")
    add(names[40], "attach_rate", g(f_att[40], 3), "1/s", pick("kin"), "p. 4", _id="DEMO-NOTEMP", notes="temperature not stated")
    # a curator-computed kinetic time from the attach and detach rows of one taxon
    kt = next(t for t in names if (t, "attach_rate") in rows_by and (t, "detach_rate") in rows_by)
    a_row, d_row = rows[rows_by[(kt, "attach_rate")]], rows[rows_by[(kt, "detach_rate")]]
    del donor_row

    # --- ids, synonyms --------------------------------------------------------------------
    columns = ["obs_id", "taxon", "quantity", "value", "unit", "uncertainty", "uncertainty_kind", "n", "source_id",
               "locator", "basis", "inputs", "proxy_taxon", "temperature_c", "preparation", "muscle", "notes", "entered_by", "entered_on"]
    counter = 0
    for r in rows:
        if "_id" not in r:
            counter += 1
            r["obs_id"] = f"OBS{counter:04d}"
        else:
            r["obs_id"] = r.pop("_id")
        r.setdefault("entered_by", "demo generator")
        r.setdefault("entered_on", "2026-12-01")
    fa, fd = float(a_row["value"]), float(d_row["value"])
    kt_value = 1.0 / (fa + fd)
    kt_rel = np.hypot(float(a_row["uncertainty"]), float(d_row["uncertainty"])) / (fa + fd)  # first order, as the curator would
    rows.append({"obs_id": "DEMO-COMPUTED", "taxon": kt, "quantity": "kinetic_time", "value": g(kt_value * 1e3, 3), "unit": "ms",
                 "uncertainty": g(kt_value * 1e3 * kt_rel, 2), "uncertainty_kind": "se",
                 "source_id": a_row["source_id"], "locator": a_row["locator"], "basis": "computed",
                 "inputs": f"{a_row['obs_id']};{d_row['obs_id']}", "temperature_c": a_row.get("temperature_c", ""),
                 "notes": "1/(f+g) from the two rate rows", "entered_by": "demo generator", "entered_on": "2026-12-01"})
    # a synonym: one taxon reported under an older name in one source
    syn_target = names[5]
    k = rows_by[(syn_target, "fiber_length")] if (syn_target, "fiber_length") in rows_by else rows_by[(syn_target, "body_mass")]
    old_name = syn_target.split()[0][:-1] + "us " + syn_target.split()[1]
    rows[k]["taxon"] = old_name

    def cell(v: str) -> str:
        v = str(v)
        return f'"{v}"' if ("," in v or '"' in v) else v

    obs_lines = [",".join(columns)] + [",".join(cell(r.get(c, "")) for c in columns) for r in rows]

    # --- taxa table and tree --------------------------------------------------------------
    taxa = ["taxon,accepted_name,tree_label,clade"]
    for name, clade in zip(names, clades, strict=True):
        taxa.append(f"{name},,{name.replace(' ', '_')},{clade}")
    taxa.append(f"{old_name},{syn_target},,{clades[5]}")
    newick = random_tree(rng, names, clades)

    settings = f"""# Settings of the synthetic demo compilation (all invented data; see demo_tables/generate.py)
title = "Synthetic cyclers: an invented compilation for the comparo demo"
reference_temperature_c = {T_REF}

[q10]
attach_rate = 2.5
detach_rate = 2.5
frequency_observed = 2.0

[derive]
length = "fiber_radius"
permeability_model = "happel_parallel"
cytosol_viscosity_factor = 1.0

[[analysis]]
x = "body_mass"
y = "frequency_observed"
method = "sma"
by = "clade"

[[analysis]]
x = "fiber_radius"
y = "frequency_observed"
method = "sma"

[[analysis]]
x = "body_mass"
y = "frequency_observed"
method = "pgls"
"""
    readme = """# synthetic_cyclers: an invented compilation

Every taxon, clade, source and number in this folder is INVENTED by
`demo_tables/generate.py` (seeded) to demonstrate comparo. Nothing here is a
measurement, and no conclusion about real animals can be drawn from it.
The planted curation faults are listed in the generator's docstring.

`truth.csv` holds the invented generating values per taxon (true values at
25 °C before measurement noise: frequency, fiber radius, d10, transverse
modulus, rates, and the poroelastic and kinetic times, their ratio, the
frequency bounds and the limiting process they imply). It is not part of the
compilation (comparo does not read it); it lets a user check how well
`comparo derive` recovers a known answer.
"""
    return {
        "observations.csv": "\n".join(obs_lines) + "\n",
        "sources.csv": "\n".join(sources) + "\n",
        "taxa.csv": "\n".join(taxa) + "\n",
        "tree.nwk": newick + "\n",
        "comparo.toml": settings,
        "README.md": readme,
        "truth.csv": truth,
    }


def truth_rows(names, clades, m, freq, radius, d10, e_trans, f_att, g_det, tau_p, tau_x, f_kin, f_hyd) -> str:
    """The generating (true, 25 °C, noise-free) values per taxon as CSV text; all invented."""
    cols = ["taxon", "clade", "body_mass_kg", "frequency_hz", "fiber_radius_um", "lattice_spacing_d10_nm",
            "transverse_modulus_kpa", "attach_rate_per_s", "detach_rate_per_s", "poroelastic_time_s", "kinetic_time_s",
            "poro_kinetic_ratio", "frequency_kinetic_bound_hz", "frequency_hydraulic_bound_hz", "frequency_ratio", "regime"]
    lines = [",".join(cols)]
    for i, name in enumerate(names):
        f_min = min(f_kin[i], f_hyd[i])
        vals = [m[i], freq[i], radius[i], d10[i], e_trans[i], f_att[i], g_det[i], tau_p[i], tau_x[i], tau_p[i] / tau_x[i],
                f_kin[i], f_hyd[i], freq[i] / f_min]
        regime = "kinetic" if f_kin[i] <= f_hyd[i] else "hydraulic"
        lines.append(",".join([name, clades[i], *(f"{float(v):.8g}" for v in vals), regime]))
    return "\n".join(lines) + "\n"


def random_tree(rng: np.random.Generator, names: list[str], clades: list[str]) -> str:
    """An ultrametric random tree (depth 100 time units): clades are monophyletic,
    topologies inside and among clades from random sequential splits."""

    def build(labels: list[str], depth: float) -> tuple[str, float]:
        # returns newick of the subtree and the height of its root above the tips
        if len(labels) == 1:
            return labels[0], 0.0
        k = int(rng.integers(1, len(labels)))
        perm = [labels[i] for i in rng.permutation(len(labels))]
        left, right = perm[:k], perm[k:]
        h = depth
        child_depth = h * float(rng.uniform(0.35, 0.85))
        parts = []
        for side in (left, right):
            sub, sh = build(side, child_depth if len(side) > 1 else 0.0)
            parts.append(f"{sub}:{h - sh:.4f}")
        return f"({parts[0]},{parts[1]})", h

    groups = {}
    for n, c in zip(names, clades, strict=True):
        groups.setdefault(c, []).append(n.replace(" ", "_"))
    clade_trees = []
    for c in CLADES:
        sub, h = build(groups[c], 40.0 * float(rng.uniform(0.6, 1.0)))
        clade_trees.append((sub, h))
    # join clades at random with a root at height 100
    nodes = list(clade_trees)
    height = 60.0
    while len(nodes) > 1:
        i, j = sorted(rng.choice(len(nodes), 2, replace=False))
        (a, ha), (b, hb) = nodes[i], nodes[j]
        height = max(height, ha, hb) + float(rng.uniform(2.0, 8.0))
        new = (f"({a}:{height - ha:.4f},{b}:{height - hb:.4f})", height)
        nodes = [n for k, n in enumerate(nodes) if k not in (i, j)] + [new]
    return nodes[0][0] + ";"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="compare with the committed files instead of writing")
    parser.add_argument("-o", "--output", type=Path, default=OUT)
    args = parser.parse_args(argv)
    files = make(np.random.default_rng(SEED))
    if args.check:
        stale = [n for n, text in files.items() if not (args.output / n).is_file() or (args.output / n).read_text(encoding="utf-8") != text]
        if stale:
            print("differs from the generator: " + ", ".join(stale))
            return 1
        print("demo files match the generator")
        return 0
    args.output.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        (args.output / name).write_bytes(text.encode("utf-8"))
    print(f"wrote {len(files)} files to {args.output}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
