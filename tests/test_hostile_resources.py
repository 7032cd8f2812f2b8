"""Hostile resources: nesting, names, special files and sizes that once crashed (exit 3) or
hung. Each is refused with exit 2 and a message naming the rule, or runs within its bounds;
the inputs stay byte-identical and nothing appears outside the output asked for."""

from __future__ import annotations

import os
import subprocess

import pytest
from hostile_checks import refused
from support import DEMO, run_main, write_dataset

# ------------------------------------------------------------------ nesting


@pytest.mark.parametrize(
    "text",
    [
        "a = " + "[" * 5000 + "]" * 5000 + "\n",  # arrays beyond the parser's recursion
        "a = " + "{b = " * 3000 + "1" + "}" * 3000 + "\n",  # inline tables beyond it
        "a = " + "[" * 40 + "]" * 40 + "\n",  # parses, but deeper than any setting
        "[" + ".".join(["t"] * 30) + "]\nx = 1\n",  # dotted table headers
    ],
)
def test_deeply_nested_settings_are_refused(tmp_path, text):
    ds = write_dataset(tmp_path / "DS")
    (ds / "comparo.toml").write_text(text, encoding="utf-8")
    for command in (["check", "{tmp}/DS"], ["table", "{tmp}/DS"]):
        refused(tmp_path, command, "nested more than 16 levels", "toml-depth")
    proc = run_main("units", str(ds))  # units reads a dataset's settings leniently
    assert proc.returncode == 0 and "internal error" not in proc.stderr, proc.stderr


def test_deeply_nested_settings_in_the_python_api(tmp_path):
    import comparo

    ds = write_dataset(tmp_path / "DS")
    (ds / "comparo.toml").write_text("a = " + "[" * 5000 + "]" * 5000 + "\n", encoding="utf-8")
    with pytest.raises(comparo.InputError) as err:
        comparo.load(ds)
    assert "toml-depth" in set(err.value.problems["rule"])


def test_deeply_nested_import_map_is_refused(tmp_path):
    (tmp_path / "wide.csv").write_text(
        "Species,Body mass (g)\nApis mellifera,0.1\n", encoding="utf-8"
    )
    (tmp_path / "map.toml").write_text(
        "columns = " + "[" * 3000 + "]" * 3000 + "\n", encoding="utf-8"
    )
    refused(
        tmp_path,
        ["import", "{tmp}/wide.csv", "-o", "{tmp}/out", "--map", "{tmp}/map.toml"],
        "map.toml",
        "nested more than 16 levels",
        allow=("out-import-map.csv",),
    )  # the documented suggested map, beside the output


# ------------------------------------------------------------------ special files


FIT_PGLS = ["fit", str(DEMO), "--x", "body_mass", "--y", "frequency_observed", "--method", "pgls"]


def test_tree_that_is_a_fifo_is_refused_without_opening_it(tmp_path):
    """Opening a FIFO that no process writes blocks for ever; the path is refused from its kind."""
    os.mkfifo(tmp_path / "tree.nwk")
    refused(tmp_path, FIT_PGLS + ["--tree", "{tmp}/tree.nwk"], "named pipe (FIFO), not a file")


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/urandom", "/dev/null"])
def test_tree_that_is_a_device_is_refused(tmp_path, device):
    """/dev/zero never ends: reading it once exhausted memory (exit 3 or killed)."""
    if not os.path.exists(device):
        pytest.skip(f"{device} absent")
    refused(tmp_path, FIT_PGLS + ["--tree", device], "device or socket, not a file")


def test_tree_folder_is_refused(tmp_path):
    (tmp_path / "trees").mkdir()
    refused(tmp_path, FIT_PGLS + ["--tree", "{tmp}/trees"], "a folder, not a file")


def test_read_tree_refuses_a_fifo(tmp_path):
    import comparo

    os.mkfifo(tmp_path / "t.nwk")
    with pytest.raises(comparo.InputError, match="named pipe"):
        comparo.read_tree(tmp_path / "t.nwk")


@pytest.mark.parametrize(
    "argv",
    [
        ["table", str(DEMO), "-o", "{tmp}/pipe"],
        ["derive", str(DEMO), "-o", "{tmp}/pipe"],
        ["cycles", str(DEMO), "-o", "{tmp}/pipe"],
    ],
)
def test_output_fifo_without_a_reader_fails_at_once(tmp_path, argv):
    """Writing to a FIFO that no process reads used to block for ever; it is opened without
    blocking and refused (ENXIO), and the FIFO stays a FIFO."""
    import stat

    os.mkfifo(tmp_path / "pipe")
    refused(tmp_path, argv, "named pipe (FIFO) that no process is reading")
    assert stat.S_ISFIFO(os.stat(tmp_path / "pipe").st_mode)


# ------------------------------------------------------------------ names


def test_output_name_longer_than_the_file_system_takes(tmp_path):
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    long = "a" * (name_max + 5)
    for argv in (
        ["table", str(DEMO), "-o", f"{{tmp}}/{long}.csv"],
        ["audit", str(DEMO), "-o", f"{{tmp}}/{long}"],
        ["report", str(DEMO), "-o", f"{{tmp}}/{long}/inner"],
        ["export", str(DEMO), "--to", "dwc", "-o", f"{{tmp}}/{long}"],
    ):
        err = refused(tmp_path, argv, "choose a shorter name", f"at most {name_max} bytes")
        assert len(err) < 1000  # the message shows the start of the name, not all of it


def test_output_name_without_room_for_the_temporary_file(tmp_path):
    """The atomic write needs a temporary name 16 bytes longer than the output's, so a name
    that fits the file system but not that is refused before any work too."""
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    refused(
        tmp_path, ["table", str(DEMO), "-o", "{tmp}/" + "b" * (name_max - 4)], "for an output file"
    )


def test_output_path_longer_than_the_file_system_takes(tmp_path):
    path_max = os.pathconf(tmp_path, "PC_PATH_MAX")
    deep = "/".join(["d" * 50] * (path_max // 51 + 2))
    err = refused(
        tmp_path, ["table", str(DEMO), "-o", "{tmp}/" + deep + "/t.csv"], "paths of at most"
    )
    assert len(err) < 1000


def test_a_name_just_under_the_limit_is_written(tmp_path):
    """The table and its units file (NAME.units.csv, 10 bytes longer) both fit."""
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    name = "c" * (name_max - 16 - len(".units.csv"))
    proc = run_main("table", str(DEMO), "-o", str(tmp_path / name))
    assert proc.returncode == 0, proc.stderr
    assert sorted(os.listdir(tmp_path)) == sorted([name, name + ".units.csv"])


def test_a_units_file_over_the_limit_stops_the_table_before_it_is_written(tmp_path):
    """The table's own name fits but its units file's would not: refused, nothing written."""
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    name = "c" * (name_max - 16)
    refused(
        tmp_path, ["table", str(DEMO), "-o", "{tmp}/" + name], "units.csv", "choose a shorter name"
    )


# ------------------------------------------------------------------ memory and time


def _limited(argv: list[str], limit_bytes: int, cwd) -> subprocess.CompletedProcess:
    """comparo ARGV in a fresh interpreter whose address space is limited (RLIMIT_AS)."""
    import resource
    import sys

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    return subprocess.run(
        [sys.executable, "-m", "comparo", *argv],
        capture_output=True,
        text=True,
        timeout=120,
        preexec_fn=limit,
        cwd=cwd,
    )


@pytest.mark.parametrize(
    "argv,words",
    [
        (
            ["derive", str(DEMO), "--mc", "3000000", "-o", "out.csv"],
            ["--mc 3000000 exceeds this machine's cap", "GiB this process may use"],
        ),
        (
            [
                "fit",
                str(DEMO),
                "--x",
                "body_mass",
                "--y",
                "frequency_observed",
                "--bootstrap",
                "60000000",
            ],
            ["--bootstrap 60000000 exceeds this machine's cap", "GiB this process may use"],
        ),
    ],
)
def test_caps_follow_the_memory_the_process_may_use(tmp_path, argv, words):
    """Under a 1.5 GiB address-space limit the caps shrink to what the process may still use
    (these counts pass the caps of the unlimited machine when it has 8 GiB or more) and the
    run is refused before any work, exit 2, instead of a MemoryError (exit 3)."""
    from comparo.base.arguments import memory_bytes

    if memory_bytes() < 8 * 2**30:
        pytest.skip("the machine itself has less than 8 GiB")
    proc = _limited(argv, 1536 * 2**20, tmp_path)
    assert proc.returncode == 2, proc.stderr[-2000:]
    for w in words:
        assert w in proc.stderr, proc.stderr
    assert list(tmp_path.iterdir()) == []


def test_memory_bytes_reads_the_address_space_limit():
    import sys

    code = (
        "import resource; resource.setrlimit(resource.RLIMIT_AS, (1 << 31, 1 << 31)); "
        "from comparo.base.arguments import memory_bytes; print(memory_bytes())"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True
    )
    assert 64 * 2**20 <= int(out.stdout) < 2**31


def test_a_run_that_cannot_allocate_says_so(monkeypatch):
    """Whatever the estimate missed: a MemoryError is exit 2 with a sentence, not exit 3."""
    import comparo.cli.commands.table as table

    def boom(args):
        raise MemoryError

    monkeypatch.setattr(table, "run", boom)
    proc = run_main("table", str(DEMO))
    assert proc.returncode == 2
    assert "not enough memory for this run" in proc.stderr and "internal error" not in proc.stderr


@pytest.mark.parametrize("method,budget,count", [("lts", None, "100000"), ("robust", 0.05, "2000")])
def test_a_refitting_bootstrap_is_bounded_by_its_measured_time(
    tmp_path, monkeypatch, method, budget, count
):
    """LTS and robust refit every resample; the cap comes from the time of one fit measured on
    the data (not from a fixed rate), so a count that would run for hours is refused at once
    (for robust the time budget is lowered to 0.05 s here, and the fixed-rate cap lifted, so
    that only the measured bound can refuse it)."""
    import comparo.base.arguments

    if budget is not None:
        monkeypatch.setattr(comparo.base.arguments, "TIME_BUDGET_S", budget)
        monkeypatch.setattr(comparo.base.arguments, "REFITS_PER_S", 1e9)
    said = refused(
        tmp_path,
        [
            "fit",
            str(DEMO),
            "--x",
            "body_mass",
            "--y",
            "frequency_observed",
            "--method",
            method,
            "--bootstrap",
            count,
        ],
        f"--bootstrap {count} would take about",
        f"one {method} fit of these",
        "resamples fit in",
    )
    assert "min here" in said


def test_a_trace_file_beyond_the_cap_is_refused_before_reading(tmp_path):
    """A 10-million-sample trace (230 MB) once needed 3.3 GB; a trace file over 32 MB is refused
    from its size (a sparse file here: never read)."""
    from hostile_checks import demo_copy

    import comparo.traces.files

    ds = demo_copy(tmp_path)
    with open(ds / "trace_WL1.csv", "r+b") as fh:
        fh.truncate(comparo.traces.files.MAX_TRACE_BYTES + 1)
    refused(
        tmp_path, ["cycles", "{tmp}/DS"], "trace_WL1.csv", "is 32 MB", "at most 32 MB", "trace-size"
    )
