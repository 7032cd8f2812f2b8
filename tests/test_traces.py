"""traces.csv and trace files: units (ms, %, mN, mm), the comparo cycles command, the
computed rows in the harmonised table, and hostile traces (all problems in one pass, exit 2)."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
from support import VALID_ROWS, run_main, tree_hash, write_dataset

HEADER = (
    "trace_id,file,taxon,source_id,locator,kind,time_column,time_unit,x_column,x_unit,"
    "y_column,y_unit,temperature_c,muscle"
)
DL_MM, DF_MN, PHI, F_HZ = (
    0.3,
    40.0,
    0.7,
    18.0,
)  # work loop: length amplitude mm, force amplitude mN, force lag rad
A_PCT, B_PCT = 2.0, 0.5  # strain ellipse semi-axes in %


def _write_work_loop(path, *, reverse=False, rng=None):
    t = np.arange(0.0, 0.6, 1 / 3000)
    w = 2 * math.pi * F_HZ * t
    length = 6.0 + DL_MM * np.sin(w)
    force = (
        120.0
        + DF_MN * np.sin(w + PHI if reverse else w - PHI)
        + rng.normal(0, 0.4, len(t))
        + 3.0 * t
    )
    path.write_text(
        "time_ms,len_mm,force_mN\n"
        + "\n".join(
            f"{a * 1e3:.5f},{b:.7f},{c:.5f}" for a, b, c in zip(t, length, force, strict=True)
        )
        + "\n"
    )


def _write_strain(path, *, rng=None):
    t = np.arange(0.0, 0.5, 1 / 3000)
    w = 2 * math.pi * 11.0 * t
    ea = 1.0 + A_PCT * np.cos(w) + rng.normal(0, 0.01, len(t))
    er = -0.5 + B_PCT * np.sin(w) + rng.normal(0, 0.01, len(t))
    path.write_text(
        "t_s,axial_pct,radial_pct\n"
        + "\n".join(f"{a:.6f},{b:.6f},{c:.6f}" for a, b, c in zip(t, ea, er, strict=True))
        + "\n"
    )


@pytest.fixture
def traced(tmp_path):
    rows = [
        *VALID_ROWS,
        "o7,Apis mellifera,muscle_mass,20,mg,,,,s1,Table 1,reported,,,",
        "o8,Bombus terrestris,odd_modulus,50,kPa,,,,s2,Table 3,reported,,,",
    ]
    ds = write_dataset(tmp_path / "ds", rows)
    rng = np.random.default_rng(17)
    (ds / "loops").mkdir()
    _write_work_loop(ds / "loops" / "w1.csv", rng=rng)
    _write_work_loop(ds / "loops" / "w2.csv", reverse=True, rng=rng)
    _write_strain(ds / "s1.csv", rng=rng)
    (ds / "traces.csv").write_text(
        "\n".join(
            [
                HEADER,
                (
                    "W1,loops/w1.csv,Apis mellifera,s1,Fig. 5A,work_loop,time_ms,ms,len_mm,mm,"
                    "force_mN,mN,30,flight"
                ),
                (
                    "W2,loops/w2.csv,Apis mellifera,s1,Fig. 5B,work_loop,time_ms,ms,len_mm,mm,"
                    "force_mN,mN,30,flight"
                ),
                (
                    "S1,s1.csv,Bombus terrestris,s2,Fig. 2,strain_cycle,t_s,s,axial_pct,%,"
                    "radial_pct,%,25,"
                ),
            ]
        )
        + "\n"
    )
    return ds


def _traces(proc):
    assert proc.returncode == 0, proc.stderr
    return {t["trace_id"]: t for t in json.loads(proc.stdout)["traces"]}


def test_cycles_json_in_si_with_unit_conversions(traced):
    before = tree_hash(traced)
    got = _traces(run_main("cycles", str(traced), "--format", "json"))
    w_expected = (
        math.pi * (DL_MM * 1e-3) * (DF_MN * 1e-3) * math.sin(PHI)
    )  # J, analytic sinusoid loop
    w1, w2, s1 = got["W1"], got["W2"], got["S1"]
    assert w1["frequency"] == pytest.approx(F_HZ, rel=1e-3)
    assert w1["net_work"] == pytest.approx(w_expected, rel=0.01)
    assert w1["net_work_sd"] > 0 and w1["cycles"] >= 9
    assert w1["power"] == pytest.approx(w_expected * F_HZ, rel=0.01)
    # force leading length: the muscle absorbs work, the loop runs clockwise
    assert w2["net_work"] == pytest.approx(-w_expected, rel=0.01)
    # mass-specific power with the taxon's muscle mass (20 mg = 2e-5 kg)
    assert w1["muscle_mass"] == pytest.approx(2e-5)
    assert w1["mass_specific_power"] == pytest.approx(w1["power"] / 2e-5, rel=1e-12)
    # strain in %: the area of an ellipse pi a b in strain (fractions), counter-clockwise
    assert s1["loop_area"] == pytest.approx(math.pi * A_PCT * B_PCT * 1e-4, rel=0.01)
    assert s1["net_work"] is None and w1["loop_area"] is None
    # odd modulus 50 kPa of the taxon: work per volume = K_o x area (J/m^3)
    assert s1["odd_modulus"] == pytest.approx(5e4)
    assert s1["work_density"] == pytest.approx(5e4 * s1["loop_area"], rel=1e-12)
    assert set(s1["units"]) >= {"frequency", "net_work", "power", "loop_area"}
    assert tree_hash(traced) == before


def test_results_enter_the_table_as_computed_values_with_lineage(traced, tmp_path):
    proc = run_main("table", str(traced), "-o", str(tmp_path / "t.csv"))
    assert proc.returncode == 0, proc.stderr
    import pandas as pd

    tab = pd.read_csv(tmp_path / "t.csv").set_index("taxon")
    apis = tab.loc["Apis mellifera"]
    assert apis["net_work_basis"] == "computed"
    assert set(apis["net_work_obs"].split(";")) == {"W1:net_work", "W2:net_work"}
    assert apis["net_work_n"] == 2
    assert tab.loc["Bombus terrestris", "loop_area_basis"] == "computed"
    audit = json.loads(run_main("audit", str(traced), "--format", "json").stdout)
    assert audit["balanced"] and audit["basis_shares"]["net_work"] == {"computed": 1.0}
    from comparo import load
    from comparo.curation.provenance import lineage

    lin = lineage(load(traced)).set_index("obs_id")
    assert (
        lin.loc["W1:net_work", "status"] == "used"
        and lin.loc["W1:net_work", "basis_effective"] == "computed"
    )
    assert lin.loc["W1:net_work", "unit_canonical"] == "J"
    from comparo.curation.harmonise import harmonise

    rows = harmonise(load(traced)).rows.set_index("obs_id")
    note = rows.loc["W1:net_work", "notes"]
    assert "loops/w1.csv" in note and "whole cycle" in note
    assert rows.loc["W1:mass_specific_power", "inputs"].split(";") == ["trace:W1", "o7"]
    assert rows.loc["W1:net_work", "inputs"] == "trace:W1"  # net work rests on the trace alone
    assert rows.loc["S1:work_density", "inputs"].split(";") == ["trace:S1", "o8"]


def test_exports_carry_the_trace_results(traced, tmp_path):
    assert (
        run_main("export", str(traced), "--to", "dwc", "-o", str(tmp_path / "dwc")).returncode == 0
    )
    import pandas as pd

    mof = pd.read_csv(tmp_path / "dwc" / "measurementorfact.csv").set_index("measurementID")
    assert mof.loc["W1:net_work", "measurementUnit"] == "J"
    assert "trace W1" in mof.loc["W1:net_work", "measurementRemarks"]
    assert (
        run_main(
            "export", str(traced), "--to", "datapackage", "-o", str(tmp_path / "dp")
        ).returncode
        == 0
    )
    pkg = json.loads((tmp_path / "dp" / "datapackage.json").read_text())
    assert "cycles" in [r["name"] for r in pkg["resources"]]
    cyc = pd.read_csv(tmp_path / "dp" / "cycles.csv")
    assert list(cyc["trace_id"]) == ["W1", "W2", "S1"]


def test_check_passes_and_csv_output_file(traced, tmp_path):
    assert run_main("check", str(traced)).returncode == 0
    out = tmp_path / "c.csv"
    proc = run_main("cycles", str(traced), "--format", "csv", "-o", str(out))
    assert proc.returncode == 0, proc.stderr
    import pandas as pd

    frame = pd.read_csv(out)
    assert list(frame["trace_id"]) == ["W1", "W2", "S1"] and "net_work_sd" in frame
    text = run_main("cycles", str(traced))
    assert text.returncode == 0 and "W1" in text.stdout and "net work" in text.stdout
    inside = run_main("cycles", str(traced), "-o", str(traced / "out.json"))
    assert inside.returncode == 2 and not (traced / "out.json").exists()


def test_implied_odd_modulus_from_a_measured_work_density(traced):
    obs = traced / "observations.csv"
    obs.write_text(
        obs.read_text() + "o9,Bombus terrestris,work_density,2,J/m^3,,,,s2,Table 4,reported,,,\n"
    )
    s1 = _traces(run_main("cycles", str(traced), "--format", "json"))["S1"]
    assert s1["odd_modulus_implied"] == pytest.approx(2.0 / s1["loop_area"], rel=1e-12)


def test_hostile_traces_all_reported_in_one_pass(traced, tmp_path):
    outside = tmp_path / "elsewhere.csv"
    outside.write_text("t,x,y\n0,1,2\n")
    os.symlink(outside, traced / "link.csv")
    (traced / "back.csv").write_text("t,x,y\n0,0,1\n1,1,0\n0.5,0,-1\n2,-1,0\n")
    (traced / "text.csv").write_text("t,x,y\n0,0,1\n1,abc,0\n2,,-1\n3,1.5e,0\n")
    (traced / "short.csv").write_text(
        "t,x,y\n"
        + "\n".join(f"{i / 100},{math.sin(i / 10)},{math.cos(i / 10)}" for i in range(60))
        + "\n"
    )
    lines = (traced / "traces.csv").read_text().splitlines()
    bad = [
        "B1,missing.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B2,../elsewhere.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B3,link.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        f"B4,{outside},Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B5,back.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B6,text.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B7,short.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B8,short.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,blorp,y,kPa,,",
        "B9,short.csv,Apis mellifera,s1,Fig. 1,spring_loop,t,s,x,mm,y,mN,,",
        "B10,short.csv,Apis mellifera,nosuch,Fig. 1,work_loop,t,s,x,mm,y,mN,,",
        "B11,short.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,force,mN,,",
        "W1,short.csv,Apis mellifera,s1,Fig. 1,work_loop,t,s,x,mm,y,mN,warm,",
    ]
    (traced / "traces.csv").write_text("\n".join(lines + bad) + "\n")
    before = tree_hash(traced)
    proc = run_main("check", str(traced), "--format", "json")
    assert proc.returncode == 2
    probs = json.loads(proc.stdout)["problems"]
    found = {
        (p["file"], p["row"], p["column"], p["rule"]) for p in probs if p["severity"] == "error"
    }
    r = {
        tid: 5 + i
        for i, tid in enumerate(
            ["B1", "B2", "B3", "B4", "B5", "B6", "B7", "B8", "B9", "B10", "B11", "W1b"]
        )
    }
    assert ("traces.csv", r["B1"], "file", "trace-file-missing") in found
    assert ("traces.csv", r["B2"], "file", "trace-path") in found
    assert ("traces.csv", r["B3"], "file", "trace-path") in found
    assert ("traces.csv", r["B4"], "file", "trace-path") in found
    assert ("back.csv", 4, "t", "trace-time-order") in found  # 0.5 after 1 (row 4 of back.csv)
    assert ("text.csv", 3, "x", "trace-number") in found and (
        "text.csv",
        4,
        "x",
        "trace-number",
    ) in found
    assert ("text.csv", 5, "x", "trace-number") in found
    assert ("traces.csv", r["B7"], "file", "trace-cycles") in found
    assert ("traces.csv", r["B8"], "x_unit", "trace-unit") in found
    assert ("traces.csv", r["B8"], "y_unit", "trace-unit-kind") in found
    assert ("traces.csv", r["B9"], "kind", "kind-enum") in found
    assert ("traces.csv", r["B10"], "source_id", "trace-source") in found
    assert ("traces.csv", r["B11"], "y_column", "trace-column") in found
    assert ("traces.csv", r["W1b"], "trace_id", "unique") in found
    assert ("traces.csv", r["W1b"], "temperature_c", "temperature_c-number") in found
    # every later command refuses with the same messages (exit 2, never a traceback)
    for cmd in (
        ["cycles", str(traced)],
        ["table", str(traced)],
        ["audit", str(traced)],
        ["derive", str(traced)],
    ):
        p = run_main(*cmd)
        assert p.returncode == 2, (cmd, p.stderr)
        assert "Traceback" not in p.stderr and "traces.csv" in p.stderr
    assert tree_hash(traced) == before


def test_many_bad_cells_are_counted_not_dropped(traced):
    (traced / "s1.csv").write_text(
        "t_s,axial_pct,radial_pct\n" + "\n".join(f"{i},x{i},1" for i in range(100)) + "\n"
    )
    proc = run_main("check", str(traced), "--format", "json")
    assert proc.returncode == 2
    probs = [p for p in json.loads(proc.stdout)["problems"] if p["file"] == "s1.csv"]
    assert len(probs) == 21 and "80 more" in probs[-1]["message"]


def test_loop_figures_render_with_direction_arrows(traced):
    from comparo import cycles, load
    from comparo.report.figures import loop_plot, render

    for r in cycles(load(traced)).results:
        fig = loop_plot(r)
        ax = fig.axes[0]
        arrows = [a for a in ax.texts if getattr(a, "arrow_patch", None) is not None]
        assert len(arrows) == 4
        # the arrows turn the way the loop runs: their summed cross product has the sign of the area
        turn = 0.0
        cx, cy = np.mean([a.xyann for a in arrows], axis=0)
        for a in arrows:
            (x0, y0), (x1, y1) = a.xyann, a.xy
            turn += (x0 - cx) * (y1 - y0) - (y0 - cy) * (x1 - x0)
        key = "loop_area" if r.kind == "strain_cycle" else "net_work"
        assert np.sign(turn) == np.sign(r.values[key][0])
        png, svg = render(fig)
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and b"<svg" in svg


def test_per_taxon_summary_of_traces(traced):
    from comparo import cycles, load

    ts = cycles(load(traced))
    tab = ts.by_taxon().set_index(["taxon", "kind"])
    apis = tab.loc[("Apis mellifera", "work_loop")]
    w = [r.values["net_work"][0] for r in ts.results if r.taxon == "Apis mellifera"]
    assert apis["traces"] == 2
    assert apis["net_work"] == pytest.approx(np.mean(w), rel=1e-12)
    assert apis["net_work_sd"] == pytest.approx(np.std(w, ddof=1), rel=1e-9)
    assert tab.loc[("Bombus terrestris", "strain_cycle"), "traces"] == 1
    assert np.isnan(tab.loc[("Bombus terrestris", "strain_cycle"), "net_work"])
