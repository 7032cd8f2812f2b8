"""A large VALID observations table (+ sources) for the check and audit benchmarks.

Seeded; invented taxa and sources. Quantities, units and bases vary like a real
compilation (mixed units, temperatures on rates and frequencies, spreads with n).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

HEADER = [
    "obs_id",
    "taxon",
    "quantity",
    "value",
    "unit",
    "uncertainty",
    "uncertainty_kind",
    "n",
    "source_id",
    "locator",
    "basis",
    "inputs",
    "proxy_taxon",
    "temperature_c",
]
# (quantity, unit, typical value in that unit, temperature-sensitive)
SPEC = [
    ("body_mass", "mg", 200.0, False),
    ("body_mass", "g", 0.2, False),
    ("fiber_radius", "um", 15.0, False),
    ("fiber_radius", "µm", 15.0, False),
    ("lattice_spacing_d10", "nm", 40.0, False),
    ("elastic_modulus", "kPa", 100.0, False),
    ("attach_rate", "1/s", 100.0, True),
    ("detach_rate", "s^-1", 40.0, True),
    ("frequency_observed", "Hz", 100.0, True),
    ("sarcomere_length", "um", 2.5, False),
]


def write_table(
    folder: Path, n_rows: int = 100_000, n_taxa: int = 2_000, n_sources: int = 200, seed: int = 11
) -> Path:
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)

    def letters(i: int) -> str:
        return "".join(chr(97 + (i // 26**p) % 26) for p in range(3))

    taxa = [
        f"Genus{letters(i // 7)} species{letters(i)}" for i in range(n_taxa)
    ]  # binomials, 7 species a genus
    with open(folder / "sources.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["source_id", "citation", "year", "doi"])
        for s in range(n_sources):
            w.writerow(
                [
                    f"S{s}",
                    f"Invented {s} (synthetic) benchmark source",
                    1990 + s % 30,
                    f"10.99999/bench.{s}",
                ]
            )
    t_idx = rng.integers(0, n_taxa, n_rows)
    q_idx = rng.integers(0, len(SPEC), n_rows)
    s_idx = rng.integers(0, n_sources, n_rows)
    noise = np.exp(rng.normal(0, 0.04, n_rows))  # small scatter: repeated values of a taxon agree
    has_u = rng.random(n_rows) < 0.5
    with open(folder / "observations.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(HEADER)
        for i in range(n_rows):
            q, u, v0, ts = SPEC[q_idx[i]]
            v = v0 * noise[i]
            unc, kind, n = (f"{0.2 * v:.4g}", "sd", str(3 + i % 20)) if has_u[i] else ("", "", "")
            basis = "digitized" if i % 7 == 0 else "reported"
            w.writerow(
                [
                    f"B{i}",
                    taxa[t_idx[i]],
                    q,
                    f"{v:.6g}",
                    u,
                    unc,
                    kind,
                    n,
                    f"S{s_idx[i]}",
                    f"Table {1 + i % 9}",
                    basis,
                    "",
                    "",
                    "25" if ts else "",
                ]
            )
    return folder
