"""Generate the synthetic demo compilation ``demo_tables/synthetic_cyclers/``.

Everything here is INVENTED: the taxa, clades, sources and numbers are a
scenario of our own, drawn from stated scaling laws with noise by a seeded
random generator, to show what comparo does. None of it is a measurement, and
every name is constructed (stems such as *Fict-*, *Synth-*, *Imagin-*: fictitious,
synthetic, imagined) so that none should be mistaken for a real animal group.

The scenario is built tree first, as evolution would have it:

1. **The tree.** An ultrametric tree 100 time units deep: 6 clades (crown ages
   35-55), each with 2-4 genera (crown ages 8-20), each genus with 2-7 species
   (crown ages 1-6); 60 species in all. Clades and genera are monophyletic and
   the taxa are named from their place on it (a genus's species share its name;
   a clade's genera share its stem), so ``taxa.csv``'s ``clade`` column and the
   tree agree.
2. **Traits along the tree.** Body mass (log10 kg) evolves by Brownian motion
   from the root (tip standard deviation about 2.2 decades). Every other trait
   is a scaling law on the mass plus a residual that is partly Brownian along
   the same tree (shared by relatives) and partly independent:
   frequency = 30 Hz x M^-0.2 x 10^(e), e = BM (tip sd 0.10) + independent
   (sd 0.05), so the phylogenetic signal of the residual is real and its
   Pagel's lambda is 0.10² / (0.10² + 0.05²) = 0.8 (exactly, on an ultrametric
   tree) before measurement noise; fiber radius = 25 µm x M^0.08 (BM residual);
   fiber length = 8 mm x M^0.25; lattice spacing d10 and sarcomere length are
   Brownian around 42 nm and 2.6 µm.
3. **Frequency bounds.** Each taxon's two bounds are set relative to its true
   cycle frequency (at 25 °C): kinetic bound (f + g)/(2 pi) = frequency x
   10^(0.3 + BM), detach/attach 10^N(0.4, 0.1); hydraulic bound 1/(2 pi tau_p) =
   frequency x 10^(0.3 + BM); the transverse (drained) modulus M is the value that
   gives this bound through tau_p = l² eta/(k M), with l the fiber radius, k the
   Happel (1959) parallel-flow permeability of the hexagonal lattice (thick 8 nm,
   thin 5 nm, 2 thin per thick) and eta water at 25 °C; the longitudinal modulus
   is M x 10^N(0.2, 0.1). So both regimes occur and most observed frequencies lie
   below both bounds.
4. **Gaps as in a real compilation.** Body mass and frequency are reported for
   (almost) every taxon; lattice spacing, moduli and cross-bridge rates for fewer,
   and unevenly across clades (some groups are little studied). Each source works
   on one or two clades.

5. **Warm-bodied taxa.** A seventh clade of five endotherms (*Calorfict-*, from
   calor, heat), added by :func:`make_endotherms` from its own seeded stream so
   every other number of the demo is unchanged: a third lineage at the root of
   the tree (crown age 30), body mass and frequency by the same laws (frequency
   30 Hz x M^-0.2 with the same residual structure, here at each animal's own
   operating temperature of 38-41.5 °C, given in taxa.csv), fiber radius; the
   frequency is reported in vivo at the operating temperature (one species 1 °C below
   it). comparo keeps these values as measured (an endotherm's in-vivo values
   are not temperature-normalised) while the other clades' frequencies are
   normalised to 25 °C, so the report shows both treatments. No rates or moduli
   are given for them: their bounds would be at 25 °C and their frequencies at
   body temperature (docs/methods/temperature.md).

6. **Traces.** Three work loops and two strain cycles (``traces.csv`` and
   ``trace_*.csv``), with the muscle masses and one odd modulus they rely on, are
   drawn from their own seeded stream (:func:`make_traces`), so adding them left
   every other number of the demo as it was.

The true (generating) values per taxon of the six ectotherm clades are written to
``truth.csv`` (:func:`truth_rows`); reported values scatter around them as their stated
uncertainties say. Rates and frequencies are reported at measurement
temperatures of 10-35 °C (true values at 25 °C scaled with Q10 = 2.5 for rates,
2.0 for frequencies); units are mixed as in real compilations.

Planted curation faults (comparo must find each one; see tests/test_demo.py):
  * a unit slip: one fiber radius typed in mm but labelled um     (obs_id DEMO-SLIP)
  * two conflicting frequencies for one taxon from two sources    (DEMO-CONFLICT-A/B)
  * an exact duplicate row (same source, locator, value) typed twice (DEMO-DUP)
  * a proxy value borrowed from a related taxon                   (DEMO-PROXY)
  * several values read off figures (basis = digitized)
  * one rate without a measurement temperature                    (DEMO-NOTEMP)
  * one taxon reported under an older synonym in one source

Run ``python demo_tables/generate.py`` to recreate the files byte for byte
(``--check`` compares instead of writing).
"""

from __future__ import annotations

import argparse
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

SEED = 20261202
HERE = Path(__file__).resolve().parent
OUT = HERE / "synthetic_cyclers"

N_TAXA = 60
# constructed clade names: a stem meaning "invented" plus a descriptive Latin-looking ending
CLADES = ["Fictalata", "Synthonata", "Imaginostrida", "Exemplotrema", "Inventosalta", "Simulocanta"]
# genus names: the clade's stem with one of these endings (so relatives look related)
STEMS = dict(zip(CLADES, ["Fictal", "Synthon", "Imagin", "Exempl", "Invent", "Simulac"], strict=True))
GENUS_ENDINGS = ["ella", "opsis", "ina", "odes"]
EPITHETS = [
    "ficta", "inventa", "simulata", "fabricata", "imaginaria", "commenticia", "fictilis",
    "synthetica", "exempli", "putativa", "confecta", "demonstrans",
]
Q10 = {"attach_rate": 2.5, "detach_rate": 2.5, "kinetic_time": 2.5, "frequency_observed": 2.0}
T_REF = 25.0
TREE_DEPTH = 100.0
# the warm-bodied clade (invented): its own stream, so the rest of the demo is unchanged
ENDO_SEED = (SEED, 29)
ENDO_CLADE, ENDO_STEM = "Calorfictia", "Calorfict"
ENDO_SPECIES = (("ella", 3), ("opsis", 2))  # genus ending, species in it
ENDO_CROWN = 30.0
# the generating scaling laws (log10 units) and the residual structure of frequency
FREQ_EXPONENT, FREQ_AT_1KG = -0.2, 30.0  # Hz
FREQ_BM_SD, FREQ_WHITE_SD = 0.10, 0.05  # tip standard deviations of the residual (log10)
LAMBDA_TRUE = FREQ_BM_SD**2 / (FREQ_BM_SD**2 + FREQ_WHITE_SD**2)  # 0.8, before measurement noise
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


# ----------------------------------------------------------------------------- the tree


@dataclass
class Node:
    """A node of the generating tree; ``height`` is its age above the tips (time units)."""

    height: float
    children: list[Node] = field(default_factory=list)
    label: str = ""


def random_subtree(rng: np.random.Generator, parts: list[Node], crown: float) -> Node:
    """Join ``parts`` (subtrees, each with its own height) into one binary subtree
    whose root is at height ``crown``: random sequential splits, each child's root
    placed at a random fraction of its parent's height (never below its own parts)."""
    if len(parts) == 1:
        return parts[0]
    order = [parts[i] for i in rng.permutation(len(parts))]
    k = int(rng.integers(1, len(order)))
    kids = []
    for side in (order[:k], order[k:]):
        floor = max(p.height for p in side)
        if len(side) == 1:
            kids.append(side[0])
        else:
            h = floor + (crown - floor) * float(rng.uniform(0.3, 0.85))
            kids.append(random_subtree(rng, side, h))
    return Node(crown, kids)


def build_tree(rng: np.random.Generator) -> tuple[Node, list[str], list[str], list[str]]:
    """The tree and, in tip order, each species' name, genus and clade."""
    # species per clade, then genera per clade and species per genus
    per_clade = rng.multinomial(N_TAXA - 6 * 5, np.full(6, 1 / 6)) + 5  # at least 5 species a clade
    clade_nodes, names, genera, clades = [], [], [], []
    for c, clade in enumerate(CLADES):
        n_c = int(per_clade[c])
        n_gen = int(min(len(GENUS_ENDINGS), max(2, round(n_c / 3.5))))
        sizes = rng.multinomial(n_c - 2 * n_gen, np.full(n_gen, 1 / n_gen)) + 2
        stem = STEMS[clade]
        genus_nodes = []
        for j in range(n_gen):
            genus = stem + GENUS_ENDINGS[j]
            epithets = [EPITHETS[i] for i in rng.choice(len(EPITHETS), int(sizes[j]), replace=False)]
            tips = [Node(0.0, label=f"{genus}_{e}") for e in epithets]
            genus_nodes.append(random_subtree(rng, tips, float(rng.uniform(1.0, 6.0))))
        clade_nodes.append(random_subtree(rng, genus_nodes, float(rng.uniform(35.0, 55.0))))
    root = random_subtree(rng, clade_nodes, TREE_DEPTH)
    for tip in tips_of(root):
        genus, epithet = tip.label.split("_")
        names.append(f"{genus} {epithet}")
        genera.append(genus)
        clades.append(next(c for c in CLADES if genus.startswith(STEMS[c])))
    return root, names, genera, clades


def tips_of(node: Node) -> list[Node]:
    if not node.children:
        return [node]
    return [t for child in node.children for t in tips_of(child)]


def newick(node: Node, parent_height: float | None = None) -> str:
    edge = "" if parent_height is None else f":{parent_height - node.height:.4f}"
    if not node.children:
        return node.label + edge
    return "(" + ",".join(newick(c, node.height) for c in node.children) + ")" + edge


def brownian(rng: np.random.Generator, root: Node, tip_sd: np.ndarray) -> np.ndarray:
    """Brownian motion along the tree for several traits at once: each trait's
    increments have variance (tip_sd² / depth) x edge length, so its variance
    at every tip is tip_sd² (the tree is ultrametric). Rows follow tips_of(root)."""
    rate = np.asarray(tip_sd, dtype=float) ** 2 / TREE_DEPTH
    out: list[np.ndarray] = []

    def walk(node: Node, value: np.ndarray, parent_height: float) -> None:
        value = value + rng.normal(0.0, 1.0, len(rate)) * np.sqrt(rate * (parent_height - node.height))
        if not node.children:
            out.append(value)
        for child in node.children:
            walk(child, value, node.height)

    walk(root, np.zeros(len(rate)), root.height)
    return np.array(out)


# ----------------------------------------------------------------------------- traits


@dataclass
class World:
    """The generating (true, 25 °C) values per taxon, in tip order; all invented."""

    names: list[str]
    genera: list[str]
    clades: list[str]
    logm: np.ndarray  # log10 kg
    freq: np.ndarray  # Hz
    radius: np.ndarray  # µm
    length: np.ndarray  # mm
    d10: np.ndarray  # nm
    sl: np.ndarray  # µm
    e_trans: np.ndarray  # kPa
    e_long: np.ndarray  # kPa
    f_att: np.ndarray  # 1/s
    g_det: np.ndarray  # 1/s
    vfrac: np.ndarray
    tau_p: np.ndarray  # s
    tau_x: np.ndarray  # s
    f_kin: np.ndarray  # Hz
    f_hyd: np.ndarray  # Hz


def draw_world(rng: np.random.Generator, root: Node, names, genera, clades) -> World:
    n = len(names)
    # Brownian parts, one column per trait: log mass, frequency residual, log radius,
    # log length, d10, sarcomere length, kinetic margin, hydraulic margin
    bm = brownian(rng, root, [2.2, FREQ_BM_SD, 0.05, 0.08, 3.0, 0.25, 0.12, 0.28])
    logm = -2.0 + bm[:, 0]
    freq = FREQ_AT_1KG * 10 ** (FREQ_EXPONENT * logm + bm[:, 1] + rng.normal(0.0, FREQ_WHITE_SD, n))
    radius = 25.0 * 10 ** (0.08 * logm + bm[:, 2])
    length = 8.0 * 10 ** (0.25 * logm + bm[:, 3] + rng.normal(0.0, 0.05, n))
    d10 = 42.0 + bm[:, 4]
    sl = 2.6 + bm[:, 5]
    f_kin = freq * 10 ** (0.3 + bm[:, 6])
    f_hyd = freq * 10 ** (0.3 + bm[:, 7])
    tau_x = 1.0 / (2.0 * np.pi * f_kin)
    tau_p = 1.0 / (2.0 * np.pi * f_hyd)
    k_m2 = lattice_permeability_nm2(d10) * 1e-18
    e_trans = (radius * 1e-6) ** 2 * ETA_25C / (k_m2 * tau_p) / 1e3  # kPa: M = l² eta/(k tau_p)
    e_long = e_trans * 10 ** rng.normal(0.2, 0.1, n)
    g_over_f = 10 ** rng.normal(0.4, 0.1, n)
    f_att = 1.0 / (tau_x * (1.0 + g_over_f))
    vfrac = np.clip(rng.normal(0.7, 0.08, n), 0.35, 0.92)
    return World(names, genera, clades, logm, freq, radius, length, d10, sl, e_trans, e_long, f_att,
                 f_att * g_over_f, vfrac, tau_p, tau_x, f_kin, f_hyd)


# how often a quantity family is reported, per clade (some groups are little studied)
COVERAGE = {
    #            Fictalata Synthonata Imaginostrida Exemplotrema Inventosalta Simulocanta
    "length":   (0.9, 0.6, 0.8, 0.5, 0.7, 0.6),
    "lattice":  (0.95, 0.9, 0.85, 0.6, 0.9, 0.7),
    "mech":     (0.9, 0.8, 0.7, 0.4, 0.85, 0.5),
    "kin":      (0.95, 0.85, 0.6, 0.5, 0.9, 0.4),
    "vfrac":    (0.5, 0.3, 0.2, 0.1, 0.4, 0.2),
}


# ----------------------------------------------------------------------------- the compilation


def make(rng: np.random.Generator) -> dict[str, str]:
    root, names, genera, clades = build_tree(rng)
    w = draw_world(rng, root, names, genera, clades)
    n_taxa = len(names)
    ci = [CLADES.index(c) for c in clades]
    truth = truth_rows(w)

    # --- sources: each works on one quantity family and one or two clades -----------------
    n_src = 25
    src_ids = [f"SYN{i + 1:02d}" for i in range(n_src)]
    years = rng.integers(1975, 2025, n_src)
    topics = ["fiber morphometry", "X-ray diffraction of the myofilament lattice", "fiber mechanics",
              "cross-bridge kinetics", "in-vivo cycle frequency", "body size survey"]
    sources = ["source_id,citation,year,doi,url,notes"]
    for i, sid in enumerate(src_ids):
        topic = topics[i % len(topics)]
        sources.append(f"{sid},\"Synthetic source {i + 1:02d} ({years[i]}). Invented {topic} study for the comparo demo; synthetic, not a real publication.\",{years[i]},10.99999/comparo.demo.{i + 1:02d},,synthetic")
    fam = {
        "mass": src_ids[20:25], "morph": src_ids[0:5], "lattice": src_ids[5:9],
        "mech": src_ids[9:13], "kin": src_ids[13:17], "freq": src_ids[17:21],
    }
    # source k of a family studies clades k*6/len .. (+1): relatives are measured together
    studies = {sid: {(k * 6 // len(ids) + j) % 6 for j in (0, 1)} for ids in fam.values() for k, sid in enumerate(ids)}

    rows: list[dict[str, str]] = []

    def add(taxon, quantity, value, unit, source, locator, basis="reported", **extra):
        rows.append({"taxon": taxon, "quantity": quantity, "value": value, "unit": unit, "source_id": source,
                     "locator": locator, "basis": basis, **extra})

    def pick(family, i):
        mine = [s for s in fam[family] if ci[i] in studies[s]] or fam[family]
        return mine[int(rng.integers(len(mine)))]

    def locator(digitized=False):
        if digitized:
            return f"Fig. {int(rng.integers(1, 8))}{'ABCD'[int(rng.integers(4))]}"
        return f"Table {int(rng.integers(1, 6))}"

    def temp():
        return float(rng.choice([10.0, 15.0, 20.0, 22.0, 25.0, 30.0, 35.0]))

    def has(family, i):
        return rng.random() < COVERAGE[family][ci[i]]

    # a few taxa lack a frequency, one lacks a body mass, a few a fiber radius (never the fault taxa)
    spare = [i for i in range(n_taxa) if i not in (5, 7, 12, 20, 30, 31, 40)]
    no_freq = set(rng.choice(spare, 2, replace=False).tolist())
    no_mass = {int(rng.choice([i for i in spare if i not in no_freq]))}
    no_radius = set(rng.choice([i for i in spare if i not in no_freq | no_mass], 3, replace=False).tolist())

    for i, taxon in enumerate(names):
        if i not in no_mass:
            mu = ["kg", "g", "mg"][0 if w.logm[i] > 0 else (1 if w.logm[i] > -3 else 2)]
            scale = {"kg": 1.0, "g": 1e3, "mg": 1e6}[mu]
            add(taxon, "body_mass", g(10 ** w.logm[i] * scale), mu, pick("mass", i), locator(), n=str(int(rng.integers(3, 30))))
        # fiber radius, or a diameter (converted by comparo and recorded as computed)
        r = w.radius[i] * 10 ** rng.normal(0, 0.02)
        if i in no_radius:
            pass
        elif rng.random() < 0.25:
            add(taxon, "fiber_diameter", g(2 * r, 3), rng.choice(["um", "µm", "micron"]), pick("morph", i), locator(),
                uncertainty=g(0.2 * 2 * r, 2), uncertainty_kind="sd", n=str(int(rng.integers(5, 40))))
        else:
            add(taxon, "fiber_radius", g(r, 3), str(rng.choice(["um", "µm"])), pick("morph", i), locator(),
                uncertainty=g(0.05 * r, 2), uncertainty_kind="se", n=str(int(rng.integers(5, 40))))
        if has("length", i):
            add(taxon, "fiber_length", g(w.length[i], 3), "mm", pick("morph", i), locator())
        if has("lattice", i) or i == 31:
            dig = rng.random() < 0.2
            src = pick("lattice", i)
            add(taxon, "lattice_spacing_d10", g(w.d10[i], 3), "nm", src, locator(dig),
                basis="digitized" if dig else "reported", uncertainty=g(abs(rng.normal(1.0, 0.3)), 2), uncertainty_kind="sd",
                n=str(int(rng.integers(3, 12))), preparation="intact_fiber")
            add(taxon, "sarcomere_length", g(w.sl[i], 3), "um", src, locator())
        if has("mech", i):
            src = pick("mech", i)
            add(taxon, "elastic_modulus", g(w.e_long[i] * 1e3, 3), "Pa", src, locator(), preparation="intact_fiber")
            n_m = int(rng.integers(4, 15))
            mt = w.e_trans[i] * (1.0 + 0.15 / np.sqrt(n_m) * rng.normal())  # sd 15%, n_m fibers
            add(taxon, "transverse_modulus", g(mt / 1e3, 3), "MPa", src, locator(),
                uncertainty=g(0.15 * mt / 1e3, 2), uncertainty_kind="sd", n=str(n_m), preparation="intact_fiber")
        if has("vfrac", i):
            add(taxon, "myofibril_volume_fraction", g(w.vfrac[i], 2), "fraction", pick("morph", i), locator())
        if has("kin", i):
            t = temp()
            dig = rng.random() < 0.15
            src = pick("kin", i)
            for q, v in (("attach_rate", w.f_att[i]), ("detach_rate", w.g_det[i])):
                at_t = v * Q10[q] ** ((t - T_REF) / 10.0) * (1.0 + 0.1 * rng.normal())  # se 10%
                add(taxon, q, g(at_t, 3), str(rng.choice(["1/s", "s^-1"])), src, locator(dig),
                    basis="digitized" if dig else "reported", temperature_c=g(t, 3), preparation="skinned_fiber",
                    uncertainty=g(0.1 * at_t, 2), uncertainty_kind="se", n=str(int(rng.integers(4, 12))))
        if i in no_freq:
            continue
        t = temp()
        n_f = int(rng.integers(3, 25))
        fo = w.freq[i] * Q10["frequency_observed"] ** ((t - T_REF) / 10.0) * (1.0 + 0.08 / np.sqrt(n_f) * rng.normal())
        dig = rng.random() < 0.15
        add(taxon, "frequency_observed", g(fo, 3), "Hz", pick("freq", i), locator(dig), basis="digitized" if dig else "reported",
            temperature_c=g(t, 3), preparation="in_vivo", uncertainty=g(0.08 * fo, 2), uncertainty_kind="sd", n=str(n_f))

    # --- planted faults -------------------------------------------------------------------
    rows_by = {}
    for k, r in enumerate(rows):
        rows_by.setdefault((r["taxon"], r["quantity"]), k)
    slip_taxon = names[7]
    k = rows_by.get((slip_taxon, "fiber_radius"))
    if k is None:
        add(slip_taxon, "fiber_radius", g(w.radius[7], 3), "um", pick("morph", 7), "Table 2")
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
    # a lattice spacing borrowed from a species of the same genus (the nearest relative on the tree)
    proxy_i = next(i for i in range(30, n_taxa) if (names[i], "lattice_spacing_d10") not in rows_by
                   and any(genera[j] == genera[i] and (names[j], "lattice_spacing_d10") in rows_by for j in range(n_taxa)))
    donor_i = next(j for j in sorted(range(n_taxa), key=lambda j: abs(j - proxy_i))
                   if genera[j] == genera[proxy_i] and (names[j], "lattice_spacing_d10") in rows_by)
    donor_row = rows[rows_by[(names[donor_i], "lattice_spacing_d10")]]
    add(names[proxy_i], "lattice_spacing_d10", donor_row["value"], "nm", donor_row["source_id"], donor_row["locator"],
        basis="proxy", proxy_taxon=names[donor_i], _id="DEMO-PROXY", notes="lattice spacing of a species of the same genus")
    add(names[40], "attach_rate", g(w.f_att[40], 3), "1/s", pick("kin", 40), "p. 4", _id="DEMO-NOTEMP", notes="temperature not stated")
    # a curator-computed kinetic time from the attach and detach rows of one taxon
    kt = next(t for t in names if (t, "attach_rate") in rows_by and (t, "detach_rate") in rows_by)
    a_row, d_row = rows[rows_by[(kt, "attach_rate")]], rows[rows_by[(kt, "detach_rate")]]

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
    endo = make_endotherms(root)
    for r in endo.rows:
        r["obs_id"] = f"OBS{counter + 1:04d}"
        counter += 1
        r.setdefault("entered_by", "demo generator")
        r.setdefault("entered_on", "2026-12-01")
    rows.extend(endo.rows)
    trace_files, trace_rows = make_traces(w)
    rows.extend(trace_rows)
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
    taxa = ["taxon,accepted_name,tree_label,clade,genus,thermoregulation,operating_temperature_c"]
    for name, genus, clade in zip(names, genera, clades, strict=True):
        taxa.append(f"{name},,{name.replace(' ', '_')},{clade},{genus},ectotherm,")
    taxa.append(f"{old_name},{syn_target},,{clades[5]},{genera[5]},ectotherm,")
    for name, genus, t_op in zip(endo.names, endo.genera, endo.t_op, strict=True):
        taxa.append(f"{name},,{name.replace(' ', '_')},{ENDO_CLADE},{genus},endotherm,{t_op:g}")
    tree_text = newick(root) + ";"

    settings = f"""# Settings of the synthetic demo compilation (all invented data; see demo_tables/generate.py)
title = "Synthetic cyclers: an invented compilation for the comparo demo"
# rates and frequencies are normalised to this temperature, except the in-vivo values of the
# endotherms (thermoregulation in taxa.csv), which stay at their body temperature;
# reference_temperature_c = "operating" would bring every taxon to its own operating temperature
reference_temperature_c = {T_REF}

[q10]
attach_rate = 2.5
detach_rate = 2.5
frequency_observed = 2.0

[derive]
length = "fiber_radius"
permeability_model = "happel_parallel"
cytosol_viscosity_factor = 1.0

# phylogenetic imputation (docs/methods/imputation.md): table and derive add predicted lattice
# spacings (basis "imputed", with lineage and prediction SE) for the taxa on the tree without
# one; fits use them only by multiple imputation (comparo fit ... --impute)
[impute]
quantities = ["lattice_spacing_d10"]
lambda = "ml"
m = 20

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

[[comparison]]
name = "Which limit does observed frequency track?"
y = "frequency_observed"
models = [["body_mass"], ["frequency_kinetic_bound"], ["frequency_hydraulic_bound"],
          ["frequency_kinetic_bound", "frequency_hydraulic_bound"], ["frequency_kinetic_bound", "body_mass"]]
method = "pgls"
"""
    readme = """# synthetic_cyclers: an invented compilation

Every taxon, clade, source and number in this folder is INVENTED by
`demo_tables/generate.py` (seeded) to demonstrate comparo. Nothing here is a
measurement, and no conclusion about real animals can be drawn from it.
The planted curation faults are listed in the generator's docstring.

`truth.csv` holds the invented generating values per taxon of the six
ectotherm clades (true values at 25 °C before measurement noise: frequency, fiber radius, d10, transverse
modulus, rates, and the poroelastic and kinetic times, their ratio, the
frequency bounds and the limiting process they imply). It is not part of the
compilation (comparo does not read it); it lets a user check how well
`comparo derive` recovers a known answer.

The clade Calorfictia holds five invented endotherms (taxa.csv gives their
thermoregulation and operating temperature): their in-vivo frequencies are
reported at body temperature and comparo keeps them as measured, while the
other clades' frequencies are normalised to 25 °C.

`traces.csv` and the `trace_*.csv` files are invented oscillation traces (three
work loops, two strain cycles) for `comparo cycles`; their generating phase lags
and loop openings are in the notes column of `traces.csv`.
"""
    return {
        "observations.csv": "\n".join(obs_lines) + "\n",
        "sources.csv": "\n".join(sources) + "\n",
        "taxa.csv": "\n".join(taxa) + "\n",
        "tree.nwk": tree_text + "\n",
        "comparo.toml": settings,
        "README.md": readme,
        "truth.csv": truth,
        **trace_files,
    }




@dataclass
class Endotherms:
    """The warm-bodied clade: names, genera, operating temperatures (°C) and its rows."""

    names: list[str]
    genera: list[str]
    t_op: list[float]
    rows: list[dict[str, str]]


def make_endotherms(root: Node) -> Endotherms:
    """Five invented endotherms in a clade of their own, joined to the tree at its root.

    Drawn from their own stream (:data:`ENDO_SEED`): log10 body mass is Brownian along the
    new lineage from the root value -2 (tip sd 2.2 decades, as the other clades);
    frequency 30 Hz x M^-0.2 x 10^(e) with the same residual (Brownian tip sd 0.10 plus
    independent sd 0.05), read as the frequency at the animal's operating temperature
    (38-41.5 °C); fiber radius 25 µm x M^0.08 (Brownian residual). Reported: body mass,
    fiber radius and the in-vivo frequency at the operating temperature (the last species
    1 °C below it). The root gains a third child (a basal trichotomy); the tree stays
    ultrametric. All invented.
    """
    rng = np.random.default_rng(list(ENDO_SEED))
    genus_nodes, names, genera = [], [], []
    for ending, k in ENDO_SPECIES:
        genus = ENDO_STEM + ending
        epithets = [EPITHETS[i] for i in rng.choice(len(EPITHETS), k, replace=False)]
        tips = [Node(0.0, label=f"{genus}_{e}") for e in epithets]
        genus_nodes.append(random_subtree(rng, tips, float(rng.uniform(2.0, 6.0))))
    clade = random_subtree(rng, genus_nodes, ENDO_CROWN)
    bm = brownian(rng, Node(TREE_DEPTH, [clade]), [2.2, FREQ_BM_SD, 0.05])
    root.children.append(clade)
    for tip in tips_of(clade):
        names.append(tip.label.replace("_", " "))
        genera.append(tip.label.split("_")[0])
    n = len(names)
    logm = -2.0 + bm[:, 0]
    freq = FREQ_AT_1KG * 10 ** (FREQ_EXPONENT * logm + bm[:, 1] + rng.normal(0.0, FREQ_WHITE_SD, n))
    radius = 25.0 * 10 ** (0.08 * logm + bm[:, 2])
    t_op = [round(float(t) * 2) / 2 for t in rng.uniform(38.0, 41.5, n)]
    rows = []
    for i, name in enumerate(names):
        src_mass, src_morph, src_freq = "SYN21", "SYN02", ("SYN18", "SYN19")[i % 2]
        rows.append({"taxon": name, "quantity": "body_mass", "value": g(10 ** logm[i], 4), "unit": "kg",
                     "source_id": src_mass, "locator": "Table 4", "basis": "reported", "n": str(int(rng.integers(3, 30)))})
        r = radius[i] * 10 ** rng.normal(0, 0.02)
        rows.append({"taxon": name, "quantity": "fiber_radius", "value": g(r, 3), "unit": "um", "source_id": src_morph,
                     "locator": "Table 5", "basis": "reported", "uncertainty": g(0.05 * r, 2), "uncertainty_kind": "se",
                     "n": str(int(rng.integers(5, 40)))})
        t = t_op[i] - (1.0 if i == n - 1 else 0.0)
        n_f = int(rng.integers(3, 25))
        fo = freq[i] * Q10["frequency_observed"] ** ((t - t_op[i]) / 10.0) * (1.0 + 0.08 / np.sqrt(n_f) * rng.normal())
        rows.append({"taxon": name, "quantity": "frequency_observed", "value": g(fo, 3), "unit": "Hz", "source_id": src_freq,
                     "locator": "Table 6", "basis": "reported", "temperature_c": g(t, 3), "preparation": "in_vivo",
                     "uncertainty": g(0.08 * fo, 2), "uncertainty_kind": "sd", "n": str(n_f),
                     "notes": "in vivo at body temperature"})
    return Endotherms(names, genera, t_op, rows)


TRACE_SEED = (SEED, 17)  # the traces draw from their own stream, so the rest of the demo is unchanged
MUSCLE_FRACTION = 0.08  # invented: the studied muscle is 8% of body mass
STRESS_AMPLITUDE_KPA = 60.0  # invented force amplitude per cross-sectional area
MUSCLE_DENSITY = 1060.0  # kg/m^3 (common practice value for muscle)


def _trace_csv(header: str, columns: list[np.ndarray], digits: list[int]) -> str:
    lines = [header]
    for vals in zip(*columns, strict=True):
        lines.append(",".join(f"{v:.{d}g}" for v, d in zip(vals, digits, strict=True)))
    return "\n".join(lines) + "\n"


def make_traces(w: World) -> tuple[dict[str, str], list[dict[str, str]]]:
    """Invented oscillation traces for `comparo cycles`: three work loops and two strain cycles,
    the files, traces.csv and the observation rows they rely on (muscle masses, one odd modulus).

    Work loops: muscle length L0 (the taxon's fiber length) +- 4% sinusoidally at the taxon's
    frequency, force = 60 kPa x cross-section (muscle mass / (density x L0)) x sin(wt - phi), phi
    drawn in 0.6-1.2 rad (so the muscle delivers work: W = pi dL dF sin phi), plus noise and a slow
    drift; 8.4 cycles, 200 samples per cycle; the length amplitude is 4% x (50 Hz / f)^0.5 (at most
    6%). Strain cycles: axial strain 3% sinusoidal; radial strain on the isochoric curve plus a
    quarter-cycle-shifted part that opens a loop (0.2% counter-clockwise, 0.5% clockwise). Nothing
    here is a measurement.
    """
    rng = np.random.default_rng(list(TRACE_SEED))
    order = np.argsort(w.logm)
    taken = {5, 7, 12, 20, 40}
    pick = [int(i) for i in order if int(i) not in taken]
    wl = [pick[5], pick[len(pick) // 2], pick[-6]]
    sc = [pick[15], pick[-16]]
    index = ["trace_id,file,taxon,source_id,locator,kind,time_column,time_unit,x_column,x_unit,y_column,y_unit,"
             "temperature_c,preparation,muscle,notes"]
    files: dict[str, str] = {}
    rows: list[dict[str, str]] = []
    units = [("ms", "mm", "mN", 1e3, 1.0, 1e3), ("s", "um", "mN", 1.0, 1e3, 1e3), ("s", "mm", "N", 1.0, 1.0, 1.0)]
    for k, i in enumerate(wl):
        f = float(w.freq[i])
        mass = MUSCLE_FRACTION * 10 ** float(w.logm[i])  # kg
        l0 = float(w.length[i]) * 1e-3  # m
        area = mass / (MUSCLE_DENSITY * l0)  # m^2
        df = STRESS_AMPLITUDE_KPA * 1e3 * area  # N
        dl = min(0.06, 0.04 * (50.0 / f) ** 0.5) * l0  # invented: smaller strains at higher frequencies
        phi = float(rng.uniform(0.6, 1.2))
        t = np.arange(0, 8.4 / f, 1 / (200 * f)) + float(rng.uniform(0, 1 / f))
        wt = 2 * np.pi * f * t
        length = l0 + dl * np.sin(wt) + 0.002 * l0 * f * (t - t[0])
        force = 0.5 * df + df * np.sin(wt - phi) + rng.normal(0, 0.02 * df, len(t)) + 0.05 * df * f * (t - t[0])
        tu, lu, fu, tf, lf, ff = units[k]
        name = f"trace_WL{k + 1}.csv"
        files[name] = _trace_csv(f"time_{tu},length_{lu},force_{fu}", [t * tf, length * 1e3 * lf, force * ff], [8, 7, 6])
        index.append(f"WL{k + 1},{name},{w.names[i]},SYN09,Fig. {k + 2},work_loop,time_{tu},{tu},length_{lu},{lu},"
                     f"force_{fu},{fu},25,in_vitro,synthetic flight muscle,invented work loop (phase lag {phi:.2f} rad)")
        rows.append({"taxon": w.names[i], "quantity": "muscle_mass", "value": g(mass * 1e6, 3), "unit": "mg",
                     "source_id": "SYN09", "locator": "Table 1", "basis": "reported", "obs_id": f"TRC{k + 1:04d}",
                     "entered_by": "demo generator", "entered_on": "2026-12-01"})
    for k, (i, opening) in enumerate(zip(sc, (0.2, -0.5), strict=True)):
        f = float(w.freq[i])
        t = np.arange(0, 6.3 / f, 1 / (150 * f))
        wt = 2 * np.pi * f * t
        ea = 3.0 * np.sin(wt) + rng.normal(0, 0.03, len(t))  # %
        er = 100 * ((1 + ea / 100) ** -0.5 - 1) - opening * np.cos(wt) + rng.normal(0, 0.03, len(t))  # %
        name = f"trace_SC{k + 1}.csv"
        files[name] = _trace_csv("time_s,axial_pct,radial_pct", [t, ea, er], [8, 6, 6])
        index.append(f"SC{k + 1},{name},{w.names[i]},SYN08,Fig. {k + 5},strain_cycle,time_s,s,axial_pct,%,radial_pct,%,"
                     f"25,intact_fiber,synthetic flight muscle,invented strain cycle ({'counter-clockwise' if opening > 0 else 'clockwise'} loop; opening {abs(opening):g}%)")
    rows.append({"taxon": w.names[sc[0]], "quantity": "odd_modulus", "value": "40", "unit": "kPa", "source_id": "SYN08",
                 "locator": "Table 2", "basis": "reported", "obs_id": "TRC0004", "notes": "invented odd modulus",
                 "entered_by": "demo generator", "entered_on": "2026-12-01"})
    files["traces.csv"] = "\n".join(index) + "\n"
    return files, rows


def truth_rows(w: World) -> str:
    """The generating (true, 25 °C, noise-free) values per taxon as CSV text; all invented."""
    cols = ["taxon", "clade", "genus", "body_mass_kg", "frequency_hz", "fiber_radius_um", "lattice_spacing_d10_nm",
            "transverse_modulus_kpa", "attach_rate_per_s", "detach_rate_per_s", "poroelastic_time_s", "kinetic_time_s",
            "poro_kinetic_ratio", "frequency_kinetic_bound_hz", "frequency_hydraulic_bound_hz", "frequency_ratio", "regime"]
    lines = [",".join(cols)]
    for i, name in enumerate(w.names):
        f_min = min(w.f_kin[i], w.f_hyd[i])
        vals = [10 ** w.logm[i], w.freq[i], w.radius[i], w.d10[i], w.e_trans[i], w.f_att[i], w.g_det[i], w.tau_p[i],
                w.tau_x[i], w.tau_p[i] / w.tau_x[i], w.f_kin[i], w.f_hyd[i], w.freq[i] / f_min]
        regime = "kinetic" if w.f_kin[i] <= w.f_hyd[i] else "hydraulic"
        lines.append(",".join([name, w.clades[i], w.genera[i], *(f"{float(v):.8g}" for v in vals), regime]))
    return "\n".join(lines) + "\n"


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
