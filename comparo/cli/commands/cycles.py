"""``comparo cycles DATASET``: strain cycles and work loops reduced from the dataset's traces."""

from __future__ import annotations

from comparo.base.outputs import dumps, emit

_TEXT_COLUMNS = (  # (JSON key, heading, factor from SI, unit shown)
    ("frequency", "frequency", 1.0, "Hz"),
    ("loop_area", "loop area", 1.0, "1"),
    ("volume_strain_amplitude", "eps_v amplitude", 1.0, "1"),
    ("isochoric_departure", "isochoric departure", 1.0, "1"),
    ("work_density", "work/volume", 1.0, "J/m^3"),
    ("net_work", "net work", 1e6, "uJ"),
    ("power", "power", 1e3, "mW"),
    ("mass_specific_power", "power/mass", 1.0, "W/kg"),
)


def render(traces, drift_removal: bool = True) -> str:
    """Plain-text table: one block per trace, mean ± SD over cycles."""
    if not traces.results:
        return "no traces (add traces.csv and the trace files it names; see docs/data-format.md)\n"
    lines = []
    for r in traces.results:
        d = r.to_dict()
        head = (
            f"{r.trace_id}  {r.taxon}  {r.kind}  {r.file}: "
            f"{r.cycles} whole cycle(s) of {r.samples} samples"
        )
        lines.append(head)
        for key, label, f, unit in _TEXT_COLUMNS:
            if d.get(key) is None:
                continue
            sd = d.get(f"{key}_sd")
            spread = f" ± {sd * f:.4g}" if sd is not None else ""
            lines.append(f"  {label:<22}{d[key] * f:.6g}{spread} {unit}")
        if d["odd_modulus_implied"] is not None:
            lines.append(f"  {'implied odd modulus':<22}{d['odd_modulus_implied']:.6g} Pa")
    lines.append(
        "(mean ± SD over cycles; --format json gives every number in SI with the per-cycle values)"
    )
    if not drift_removal:
        lines.append(
            "(signals as recorded: no drift removed; the table and report use drift removal)"
        )
    return "\n".join(lines) + "\n"


def run(args) -> int:
    from comparo.traces.files import cycles
    from comparo.validation.dataset import load

    ds = load(args.dataset)
    traces = cycles(
        ds, temperature=not args.no_temperature, drift_removal=not args.no_drift_removal
    )
    if args.format == "json":
        emit(dumps(traces.to_dict()), args.output)
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        emit(to_csv(traces.to_frame()), args.output)
    else:
        emit(render(traces, not args.no_drift_removal), args.output)
    return 0
