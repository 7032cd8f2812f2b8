"""Write the wide companion of the synthetic demo compilation (invented data).

``synthetic_cyclers_wide.csv`` lays the demo's reported values out as a curator's
wide spreadsheet: one row per taxon, one column per trait with the unit in the
header, each trait with its own source and table columns and its spread, so that
``comparo import`` can be tried on it. Every number comes from
``synthetic_cyclers/observations.csv`` (itself invented by ``generate.py``),
converted to the column's unit with pint; fiber radii are written as diameters
(twice the radius) to show the catalogue's diameter rule. A seeded few cells say
``n.d.`` instead of their value, to show how missing-value words are handled.

    python demo_tables/make_wide.py            # write the file
    python demo_tables/make_wide.py --check    # compare with the committed file
"""

from __future__ import annotations

import argparse
import csv
import io
import sys
from pathlib import Path

import numpy as np
import pint

HERE = Path(__file__).resolve().parent
DEMO = HERE / "synthetic_cyclers"
OUT = HERE / "synthetic_cyclers_wide.csv"
SEED = 20241203
N_MISSING = 4  # cells written as 'n.d.'

# quantity -> (column label, column unit, factor applied to the value); one spread column each
TRAITS = {
    "body_mass": ("Body mass", "g", 1.0),
    "fiber_radius": ("Fibre diameter", "µm", 2.0),
    "fiber_length": ("Fiber length", "mm", 1.0),
    "sarcomere_length": ("Sarcomere length", "µm", 1.0),
    "lattice_spacing_d10": ("d10", "nm", 1.0),
    "transverse_modulus": ("Transverse modulus", "kPa", 1.0),
    "frequency_observed": ("Wingbeat frequency", "Hz", 1.0),
}


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def make(rng: np.random.Generator) -> str:
    ureg = pint.UnitRegistry()
    obs = [r for r in _rows(DEMO / "observations.csv") if r["basis"] == "reported" and r["quantity"] in TRAITS]
    clades = {r["taxon"]: r["clade"] for r in _rows(DEMO / "taxa.csv")}
    first: dict[tuple[str, str], dict[str, str]] = {}
    for r in obs:
        first.setdefault((r["taxon"], r["quantity"]), r)
    # one spread kind per column: the commoner kind of that quantity's reported spreads
    kinds = {}
    for q in TRAITS:
        ks = [r["uncertainty_kind"] for (t, qq), r in first.items() if qq == q and r["uncertainty"]]
        kinds[q] = "SE" if ks.count("se") > ks.count("sd") else "SD"
    header = ["Species", "Clade", "Temperature (°C)"]
    for q, (label, unit, _) in TRAITS.items():
        header += [f"{label} ({unit})", f"{label} {kinds[q]} ({unit})", f"{label} source", f"{label} table"]
    taxa = sorted({t for t, _ in first}, key=lambda t: (clades.get(t, ""), t))
    body = []
    for t in taxa:
        freq = first.get((t, "frequency_observed"))
        row = [t, clades.get(t, ""), freq["temperature_c"] if freq else ""]
        for q, (_, unit, factor) in TRAITS.items():
            r = first.get((t, q))
            if r is None:
                row += ["", "", "", ""]
                continue
            to = ureg.Quantity(1.0, r["unit"].replace("µ", "u").replace("fraction", "dimensionless")).to(unit.replace("µ", "u")).magnitude * factor
            value = f"{float(r['value']) * to:.10g}"
            same_kind = r["uncertainty"] and r["uncertainty_kind"] == kinds[q].lower()
            spread = f"{float(r['uncertainty']) * to:.10g}" if same_kind else ""
            row += [value, spread, r["source_id"], r["locator"]]
        body.append(row)
    value_cells = [(i, j) for i, row in enumerate(body) for j, h in enumerate(header) if h.endswith(")") and " SD " not in h and " SE " not in h and j > 2 and row[j]]
    for k in rng.choice(len(value_cells), size=N_MISSING, replace=False):
        i, j = value_cells[int(k)]
        body[i][j] = "n.d."
        body[i][j + 1] = ""  # no spread of a missing value
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows([header, *body])
    return buf.getvalue()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="compare with the committed file instead of writing")
    parser.add_argument("-o", "--output", type=Path, default=OUT)
    args = parser.parse_args(argv)
    text = make(np.random.default_rng(SEED))
    if args.check:
        same = args.output.is_file() and args.output.read_text(encoding="utf-8") == text
        print("wide companion matches the generator" if same else f"{args.output} differs from the generator")
        return 0 if same else 1
    args.output.write_bytes(text.encode("utf-8"))
    print(f"wrote {args.output}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
