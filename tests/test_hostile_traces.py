"""Hostile traces: signals that trace no loop, and sizes beyond the documented cap. Each is
refused with exit 2 naming the trace and the rule; the dataset stays byte-identical."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hostile_checks import demo_copy, refused


def _rewrite(ds, name, column, values):
    frame = pd.read_csv(ds / name)
    frame[column] = values(frame)
    frame.to_csv(ds / name, index=False)


@pytest.mark.parametrize(
    "name,column,values,words",
    [
        ("trace_WL1.csv", "force_mN", lambda f: 5.0, "the force signal does not oscillate"),
        ("trace_WL1.csv", "length_mm", lambda f: 2.0, "the length signal does not oscillate"),
        # a straight ramp is all drift: what is left after removing it is rounding
        ("trace_WL1.csv", "force_mN", lambda f: 1.0 + 0.01 * np.arange(len(f)), "force signal"),
        # noise without a cycle at the length's frequency
        (
            "trace_WL1.csv",
            "force_mN",
            lambda f: np.random.default_rng(1).normal(5.0, 1.0, len(f)),
            "of the force signal's variance",
        ),
    ],
)
def test_a_signal_without_a_cycle_is_refused(tmp_path, name, column, values, words):
    """A loop needs both signals to oscillate: a constant force gives a loop of zero area,
    which once came out as a net work of 1e-15 uJ with exit 0."""
    ds = demo_copy(tmp_path)
    _rewrite(ds, name, column, values)
    said = refused(tmp_path, ["cycles", "{tmp}/DS"], "WL1", "no cycle", words, "trace-cycles")
    assert "constant or copied column" in said


def test_constant_strain_is_refused(tmp_path):
    ds = demo_copy(tmp_path)
    index = pd.read_csv(ds / "traces.csv")
    strain = index[index["kind"] != "work_loop"].iloc[0]
    _rewrite(ds, strain["file"], strain["y_column"], lambda f: 0.0)
    refused(
        tmp_path,
        ["cycles", "{tmp}/DS"],
        str(strain["trace_id"]),
        "radial strain signal does not oscillate",
    )


def test_loops_refuse_a_constant_signal_in_the_python_api():
    """Independent check: a sinusoid of 7 cycles against a constant has zero variance in one
    signal (numpy), and the reduction says so instead of returning a zero area."""
    from comparo.traces import oscillation as loops

    t = np.linspace(0, 0.07, 701)
    length = 0.01 + 0.001 * np.sin(2 * np.pi * 100 * t)
    assert np.std(np.full_like(t, 0.5)) == 0
    with pytest.raises(loops.CycleError, match="force signal does not oscillate"):
        loops.work_loop(t, length, np.full_like(t, 0.5))
    w = loops.work_loop(t, length, 0.5 + 0.1 * np.sin(2 * np.pi * 100 * t + 1.0))
    assert abs(w.cycles.frequency - 100) < 0.01
