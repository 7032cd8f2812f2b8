"""Traces: ``traces.csv`` and the trace files it names, validated and reduced to cycles.

A dataset folder may hold ``traces.csv`` (one row per trace: file, columns and
units of time, x and y, taxon, source, locator, kind) and the CSV files it names
inside the folder. :func:`read_traces` validates both (every problem in one pass,
at file, row and column) and reduces each good trace with
:mod:`comparo.traces.oscillation`; it takes a dataset and returns a :class:`TraceSet`,
cached nowhere. What needs a taxon's other values and the rows that join the harmonised
table are in :mod:`comparo.traces.rows`.

Units: every number of a :class:`TraceResult` is SI (s, Hz, dimensionless strain,
J, W, Pa = J/m³, kg, W/kg).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from comparo.base.errors import Problem
from comparo.base.results import Result
from comparo.validation.numbers import WORKING_RANGE

TRACES_FILE = "traces.csv"
WORKING = WORKING_RANGE  # magnitudes comparo computes with
MAX_LISTED = 20  # problems listed per column of one trace file before a count
# Size of one trace file, checked before it is read: every cell is read as text first (about
# 19 times the file's size in memory: 60 MB, 1.75 million samples of three columns, took
# 1.1 GB and 4 min on 2 loaded cores), so 32 MB (about a million samples) needs about 0.6 GB;
# a 10-million-sample trace (230 MB) once needed 3.3 GB and failed under a smaller limit.
MAX_TRACE_BYTES = 32 * 2**20
# quantity keys a trace contributes to the table, per kind. The cycle frequency is not one: it is
# a condition the experimenter imposed (or the preparation ran at), not a trait of the taxon, and
# two traces of one taxon would "conflict" in it at the precision of a fit.
TABLE_KEYS = {
    "strain_cycle": ("loop_area", "volume_strain_amplitude", "isochoric_departure", "work_density"),
    "work_loop": ("net_work", "power", "mass_specific_power"),
}
KEY_INPUTS = {
    "work_density": "odd_modulus",
    "mass_specific_power": "muscle_mass",
}  # the taxon value each rests on
SI_UNITS = {
    "frequency": "Hz",
    "loop_area": "1",
    "volume_strain_amplitude": "1",
    "isochoric_departure": "1",
    "net_work": "J",
    "power": "W",
    "work_density": "J/m**3",
    "odd_modulus": "Pa",
    "odd_modulus_implied": "Pa",
    "mass_specific_power": "W/kg",
    "muscle_mass": "kg",
    "cycle_bounds": "s",
}


@dataclass(frozen=True)
class TraceResult:
    """One trace reduced to whole cycles. Numbers in SI (see :data:`SI_UNITS`);
    ``values`` maps a key to ``(mean, sd)`` over cycles (sd NaN with one value),
    ``per_cycle`` to the per-cycle values; ``inputs`` the obs_ids of taxon values used."""

    trace_id: str
    taxon: str
    kind: str
    file: str
    row: int
    source_id: str
    locator: str
    temperature_c: float | None
    preparation: str
    muscle: str
    cycles: int
    samples: int
    cycle_bounds: tuple[tuple[float, float], ...]
    values: dict[str, tuple[float, float]]
    per_cycle: dict[str, tuple[float, ...]]
    inputs: dict[str, tuple[str, ...]] = field(default_factory=dict)
    odd_modulus: float | None = None
    odd_modulus_implied: float | None = None
    muscle_mass: float | None = None
    signals: tuple[Any, Any, Any] = field(default=(None, None, None), repr=False, compare=False)

    def value(self, key: str) -> float | None:
        v = self.values.get(key)
        return None if v is None else v[0]

    def to_dict(self) -> dict[str, Any]:
        """The ``comparo cycles --format json`` entry: SI numbers, each with ``KEY_sd``."""
        d: dict[str, Any] = {
            "trace_id": self.trace_id,
            "taxon": self.taxon,
            "kind": self.kind,
            "file": self.file,
            "row": self.row,
            "source_id": self.source_id,
            "locator": self.locator,
            "temperature_c": self.temperature_c,
            "cycles": self.cycles,
            "samples": self.samples,
        }
        for key in (
            "frequency",
            "loop_area",
            "volume_strain_amplitude",
            "isochoric_departure",
            "net_work",
            "power",
            "work_density",
            "mass_specific_power",
        ):
            mean, sd = self.values.get(key, (None, None))
            d[key] = _num(mean)
            d[f"{key}_sd"] = _num(sd)
        d["odd_modulus"] = _num(self.odd_modulus)
        d["odd_modulus_implied"] = _num(self.odd_modulus_implied)
        d["muscle_mass"] = _num(self.muscle_mass)
        d["cycle_bounds"] = [[a, b] for a, b in self.cycle_bounds]
        d["per_cycle"] = {k: list(v) for k, v in self.per_cycle.items()}
        d["inputs"] = {k: list(v) for k, v in self.inputs.items()}
        d["units"] = {k: SI_UNITS[k] for k in SI_UNITS}
        return d

    def lineage(self) -> str:
        """Where the numbers came from, in words: trace, file and cycles used."""
        a, b = self.cycle_bounds[0][0], self.cycle_bounds[-1][1]
        return (
            f"reduced by comparo cycles from trace {self.trace_id} ({self.file}): {self.cycles} "
            "whole cycle(s), "
            f"{a:.6g}-{b:.6g} s, at {self.values['frequency'][0]:.6g} Hz"
        )


def _num(v: Any) -> float | None:
    return None if v is None or not math.isfinite(float(v)) else float(v)


@dataclass(frozen=True)
class TraceSet(Result):
    """Every trace of a dataset: results of the good ones, problems of all (errors and warnings)."""

    results: tuple[TraceResult, ...] = ()
    problems: tuple[Problem, ...] = ()

    @property
    def ok(self) -> bool:
        return not any(p.severity == "error" for p in self.problems)

    def to_dict(self) -> dict[str, Any]:
        return {"traces": [r.to_dict() for r in self.results]}

    def summary(self) -> str:
        """Plain text: traces reduced, problems by severity, the first errors."""
        errors = [p for p in self.problems if p.severity == "error"]
        lines = [
            f"{len(self.results)} trace(s) reduced; {len(errors)} error(s), "
            f"{len(self.problems) - len(errors)} warning(s)"
        ]
        lines += [f"  error: {p.message}" for p in errors[:5]]
        return "\n".join(lines)

    def to_frame(self):
        """One row per trace, SI columns (``KEY`` and ``KEY_sd``), for ``--format csv``."""
        import pandas as pd

        rows = []
        for r in self.results:
            d = r.to_dict()
            rows.append({k: v for k, v in d.items() if not isinstance(v, dict | list)})
        return pd.DataFrame(rows)

    def by_taxon(self):
        """Per taxon (as reported in traces.csv) and kind: number of traces, and per quantity the
        mean of the per-trace means and their SD across traces (``KEY``, ``KEY_sd``; SI units,
        NaN where a taxon has one trace or the quantity does not apply). For the report's table."""
        import pandas as pd

        frame = self.to_frame()
        if frame.empty:
            return pd.DataFrame(columns=["taxon", "kind", "traces"])
        keys = [
            k
            for k in (
                "frequency",
                "loop_area",
                "volume_strain_amplitude",
                "isochoric_departure",
                "work_density",
                "net_work",
                "power",
                "mass_specific_power",
            )
            if k in frame
        ]
        grp = frame.groupby(["taxon", "kind"], sort=True)
        out = grp.size().rename("traces").to_frame()
        for k in keys:
            out[k] = grp[k].mean()
            out[f"{k}_sd"] = grp[k].std(ddof=1)
        return out.reset_index()


# --------------------------------------------------------------------------- validation


def _p(
    file: str,
    row: int | None,
    column: str | None,
    value: Any,
    rule: str,
    message: str,
    hint: str = "",
    severity: str = "error",
) -> Problem:
    return Problem(
        severity, file, row, column, None if value is None else str(value), rule, message, hint
    )


def _unit_problems(rec: dict[str, str], row: int, file: str) -> list[Problem]:
    """Units of time, x and y against the kind of trace."""
    from comparo.base import units

    kind = rec.get("kind", "")
    want = {"time_unit": ("time", "a time unit such as s or ms")}  # column -> (kind of unit, hint)
    if kind == "strain_cycle":
        want["x_unit"] = want["y_unit"] = ("fraction", "1 (strain as a fraction) or %")
    elif kind == "work_loop":
        want["x_unit"] = ("length", "a length unit such as m, mm or um")
        want["y_unit"] = ("force", "a force unit such as N or mN")
    probs = []
    for col, (unit_kind, what) in want.items():
        text = rec.get(col, "")
        if not text:
            continue  # reported as a required cell
        try:
            fits = units.measures(text, unit_kind)
        except units.UnitParseError as exc:
            probs.append(_p(file, row, col, text, "trace-unit", str(exc), f"give {what}"))
            continue
        if not fits:
            probs.append(
                _p(
                    file,
                    row,
                    col,
                    text,
                    "trace-unit-kind",
                    f"unit {text!r} does not fit a {kind or 'trace'} here",
                    f"give {what}",
                )
            )
    return probs


def _inside_folder(folder: Path, rel: str) -> tuple[Path | None, str]:
    """The trace file for *rel*, or None and why it is refused (absolute, outside the folder)."""
    if not rel:
        return None, ""
    if os.path.isabs(rel) or rel.startswith(("~", "\\")) or (len(rel) > 1 and rel[1] == ":"):
        return None, "the path is absolute; give it relative to the dataset folder"
    base = Path(os.path.realpath(folder))
    target = Path(os.path.realpath(base / rel))
    if target != base and base not in target.parents:
        return None, "the path leads outside the dataset folder (through '..' or a symbolic link)"
    return base / rel, ""


def _numbers(
    frame, columns: list[str], rows: list[int], file: str
) -> tuple[dict[str, np.ndarray], list[Problem]]:
    """The named columns as floats; every empty or non-numeric cell a problem (the first
    :data:`MAX_LISTED` per column listed, then one problem with the count)."""
    from comparo.validation.numbers import number_message as _number_message
    from comparo.validation.numbers import parse_numbers

    out, probs = {}, []
    for col in columns:
        s = frame[col]
        num = parse_numbers(s)
        bad = np.flatnonzero(num.isna().to_numpy())
        for i in bad[:MAX_LISTED]:
            text = s.iat[int(i)]
            msg, hint = (
                ("empty cell", "every sample needs a value; delete the row or fill it in")
                if text == ""
                else _number_message(text)
            )
            probs.append(_p(file, rows[int(i)], col, text, "trace-number", msg, hint))
        if len(bad) > MAX_LISTED:
            probs.append(
                _p(
                    file,
                    rows[int(bad[MAX_LISTED])],
                    col,
                    None,
                    "trace-number",
                    f"{len(bad) - MAX_LISTED} more empty or non-numeric cell(s) in this column "
                    "(not listed one by one)",
                    "fix the column; the first ones are listed above",
                )
            )
        out[col] = num.to_numpy(float)
    return out, probs


def _time_problems(t: np.ndarray, rows: list[int], file: str, column: str) -> list[Problem]:
    step = np.diff(t)
    bad = np.flatnonzero(~(step > 0)) + 1
    probs = []
    for i in bad[:MAX_LISTED]:
        probs.append(
            _p(
                file,
                rows[int(i)],
                column,
                f"{t[i]:g}",
                "trace-time-order",
                f"time does not increase (previous row has {t[i - 1]:g})",
                "samples must be in strictly increasing time; sort the file or remove the repeated "
                "row",
            )
        )
    if len(bad) > MAX_LISTED:
        probs.append(
            _p(
                file,
                rows[int(bad[MAX_LISTED])],
                column,
                None,
                "trace-time-order",
                f"{len(bad) - MAX_LISTED} more row(s) where time does not increase (not listed one "
                "by one)",
            )
        )
    return probs


def _read_one(
    ds, rec: dict[str, str], row: int, drift_removal: bool = True
) -> tuple[TraceResult | None, list[Problem]]:
    """Validate and reduce one trace (one row of traces.csv)."""
    from comparo.base import units
    from comparo.reading.tables import read_text_table
    from comparo.traces import oscillation as loops

    rel = rec["file"]
    path, why = _inside_folder(ds.folder, rel)
    if path is None:
        return None, [_p(TRACES_FILE, row, "file", rel, "trace-path", why)]
    if not path.is_file():
        what = "does not exist" if not path.exists() else "is not a regular file"
        return None, [
            _p(
                TRACES_FILE,
                row,
                "file",
                rel,
                "trace-file-missing",
                f"trace file {rel!r} {what}",
                "put the trace CSV in the dataset folder or correct the path",
            )
        ]
    size = path.stat().st_size
    if size > MAX_TRACE_BYTES:
        return None, [
            _p(
                TRACES_FILE,
                row,
                "file",
                rel,
                "trace-size",
                f"trace file {rel!r} is {size / 2**20:,.0f} MB; comparo reads trace files of at "
                "most "
                f"{MAX_TRACE_BYTES / 2**20:,.0f} MB (about a million samples of three columns)",
                "keep the whole cycles needed (a few dozen are plenty) or downsample the recording",
            )
        ]
    table, probs = read_text_table(path, name=rel)
    probs = list(probs)
    if table is None:
        return None, probs
    cols = [rec["time_column"], rec["x_column"], rec["y_column"]]
    missing = [
        (c, n)
        for c, n in zip(cols, ("time_column", "x_column", "y_column"), strict=True)
        if c not in table.frame.columns
    ]
    for c, n in missing:
        probs.append(
            _p(
                TRACES_FILE,
                row,
                n,
                c,
                "trace-column",
                f"trace file {rel!r} has no column {c!r}",
                f"its columns: {', '.join(map(str, table.frame.columns))}",
            )
        )
    if missing:
        return None, probs
    nums, p = _numbers(table.frame, cols, table.rows, rel)
    probs += p
    if p:
        return None, probs
    t = nums[cols[0]] * units.conversion_factor(rec["time_unit"], "s")
    probs += _time_problems(t, table.rows, rel, cols[0])
    if probs and any(q.severity == "error" for q in probs):
        return None, probs
    strain = rec["kind"] == "strain_cycle"
    x = nums[cols[1]] * units.conversion_factor(rec["x_unit"], "1" if strain else "m")
    y = nums[cols[2]] * units.conversion_factor(rec["y_unit"], "1" if strain else "N")
    p = _range_problems(rec, row, {cols[0]: t, cols[1]: x, cols[2]: y}, table.rows, strain)
    probs += p
    if any(q.severity == "error" for q in p):
        return None, probs
    try:
        reduce = loops.strain_loop if strain else loops.work_loop
        red = reduce(t, x, y, detrend=drift_removal)
    except loops.CycleError as exc:
        return None, probs + [
            _p(
                TRACES_FILE,
                row,
                "file",
                rel,
                "trace-cycles",
                f"trace {rec['trace_id']!r} cannot be split into cycles: {exc}",
                "check that the columns hold the recorded signals (a constant or copied column?)"
                if str(exc).startswith("no cycle:")
                else "record more whole cycles (at least 2, with at least 8 samples each), or "
                "check the columns and units",
            )
        ]
    res = _result(rec, row, red, t, x, y)
    bad = [
        k
        for k, (m, _) in res.values.items()
        if not (math.isfinite(m) and (m == 0 or WORKING[0] <= abs(m) <= WORKING[1]))
    ]
    if bad:
        return None, probs + [
            _p(
                TRACES_FILE,
                row,
                "file",
                rel,
                "trace-result-range",
                f"the reduced {', '.join(bad)} of trace {rec['trace_id']!r} leave the range "
                "comparo computes in "
                f"({WORKING[0]:g} to {WORKING[1]:g} in SI units)",
                "check the units of the columns",
            )
        ]
    return res, probs


def _range_problems(
    rec: dict[str, str], row: int, columns: dict[str, np.ndarray], rows: list[int], strain: bool
) -> list[Problem]:
    """Samples beyond what a double can take through the reduction (|v| > 1e100 in SI) are errors at
    their cell; strains at or below -100% errors at their cell, strains above 50% one warning."""
    probs = []
    for col, v in columns.items():
        far = np.flatnonzero(np.abs(v) > 1e100)
        if len(far):
            probs.append(
                _p(
                    rec["file"],
                    rows[int(far[0])],
                    col,
                    f"{v[far[0]]:g}",
                    "trace-value-range",
                    f"{len(far)} sample(s) beyond 1e100 in SI units (first shown)",
                    "check the unit of the column",
                )
            )
    if strain:
        for col, name in ((list(columns)[1], "x_unit"), (list(columns)[2], "y_unit")):
            v = columns[col]
            low = np.flatnonzero(v <= -1.0)
            if len(low):
                probs.append(
                    _p(
                        rec["file"],
                        rows[int(low[0])],
                        col,
                        f"{v[low[0]]:g}",
                        "trace-strain-range",
                        f"{len(low)} strain(s) at or below -1 (-100%): not a deformation (first "
                        "shown)",
                        f"strain typed in % with {name} 1? give the unit as %",
                    )
                )
            elif np.max(np.abs(v)) > 0.5:
                probs.append(
                    _p(
                        TRACES_FILE,
                        row,
                        name,
                        rec[name],
                        "trace-strain-large",
                        f"strains in {col} reach {100 * np.max(np.abs(v)):.3g}%: typed in % with "
                        "unit 1?",
                        "give the unit as % if the numbers are percentages",
                        severity="warning",
                    )
                )
    return probs


def _result(rec: dict[str, str], row: int, red, t, x, y) -> TraceResult:
    c = red.cycles
    fk = np.asarray(c.frequency_cycles, float)
    values: dict[str, tuple[float, float]] = {
        "frequency": (c.frequency, float(np.std(fk, ddof=1)) if len(fk) > 1 else math.nan)
    }
    per_cycle: dict[str, tuple[float, ...]] = {"frequency": tuple(fk)}
    stats = (
        {
            "loop_area": red.area,
            "volume_strain_amplitude": red.volume_strain_amplitude,
            "isochoric_departure": red.isochoric_departure,
        }
        if rec["kind"] == "strain_cycle"
        else {"net_work": red.net_work, "power": red.power}
    )
    for k, s in stats.items():
        values[k] = (s.mean, s.sd)
        per_cycle[k] = s.values
    temp = rec.get("temperature_c", "")
    return TraceResult(
        trace_id=rec["trace_id"],
        taxon=rec["taxon"],
        kind=rec["kind"],
        file=rec["file"],
        row=row,
        source_id=rec["source_id"],
        locator=rec["locator"],
        temperature_c=float(temp) if temp not in ("", None) else None,
        preparation=rec.get("preparation", ""),
        muscle=rec.get("muscle", ""),
        cycles=len(c.bounds),
        samples=len(t),
        cycle_bounds=tuple((float(a), float(b)) for a, b in c.bounds),
        values=values,
        per_cycle=per_cycle,
        signals=(t, c.x, c.y),
    )


def read_traces(ds, *, drift_removal: bool = True) -> TraceSet:
    """Validate traces.csv and every trace file it names, and reduce the good traces.

    With ``drift_removal=False`` the signals are reduced as recorded (no linear or
    quadratic drift subtracted; docs/methods/cycles.md).

    Rows of traces.csv with errors (a missing cell, an unknown kind or unit, a
    source_id not in sources, a file missing or outside the folder) and trace files
    with errors (non-numeric or empty cells, time not strictly increasing, fewer
    than 2 whole cycles) are problems naming file, row, column and value; all of
    them are collected in one pass. Nothing is cached: the caller keeps the result (the
    pipeline's :class:`comparo.pipeline.Run` reduces the traces once per run).
    """
    raw = ds.traces
    if raw is None:
        return TraceSet()
    from comparo.validation.schema import column_problems as _column_problems

    file = raw.file
    probs = list(_column_problems(raw, "traces"))
    bad_rows = {p.row for p in probs if p.severity == "error" and p.row is not None}
    whole_file = any(p.severity == "error" and p.row is None for p in probs)
    results: list[TraceResult] = []
    sources = (
        set(ds.sources["source_id"])
        if ds.sources is not None and "source_id" in ds.sources
        else set()
    )
    obs_ids = set(ds.observations["obs_id"]) if "obs_id" in ds.observations else set()
    for i, rec in enumerate(raw.frame.to_dict("records")):
        row = raw.rows[i]
        rec = {k: str(v) for k, v in rec.items()}
        if rec.get("source_id") and rec["source_id"] not in sources:
            probs.append(
                _p(
                    file,
                    row,
                    "source_id",
                    rec["source_id"],
                    "trace-source",
                    "source_id is not in the sources table",
                    "add the source to sources.csv or correct the id",
                )
            )
            bad_rows.add(row)
        clash = sorted(oid for oid in obs_ids if oid.startswith(f"{rec.get('trace_id', '')}:"))
        if clash:
            probs.append(
                _p(
                    file,
                    row,
                    "trace_id",
                    rec.get("trace_id"),
                    "trace-id-clash",
                    f"observation id(s) {', '.join(clash[:3])} look like the ids this trace's "
                    "results get (TRACE_ID:quantity)",
                    "rename the trace or those observations",
                )
            )
            bad_rows.add(row)
        up = _unit_problems(rec, row, file)
        probs += up
        if whole_file or row in bad_rows or up:
            continue
        res, p = _read_one(ds, rec, row, drift_removal)
        probs += [
            replace(q, message=f"{q.message} (trace {rec['trace_id']!r}, {file} row {row})")
            if q.file != file
            else q
            for q in p
        ]
        if res is not None:
            results.append(res)
    return TraceSet(tuple(results), tuple(probs))
