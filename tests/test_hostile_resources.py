"""Hostile resources: nesting, names, special files and sizes that once crashed (exit 3) or
hung. Each is refused with exit 2 and a message naming the rule, or runs within its bounds;
the inputs stay byte-identical and nothing appears outside the output asked for."""

from __future__ import annotations

import os

import pytest
from hostile_checks import refused
from support import DEMO, run_main, write_dataset

# ------------------------------------------------------------------ nesting


@pytest.mark.parametrize("text", [
    "a = " + "[" * 5000 + "]" * 5000 + "\n",  # arrays beyond the parser's recursion
    "a = " + "{b = " * 3000 + "1" + "}" * 3000 + "\n",  # inline tables beyond it
    "a = " + "[" * 40 + "]" * 40 + "\n",  # parses, but deeper than any setting
    "[" + ".".join(["t"] * 30) + "]\nx = 1\n",  # dotted table headers
])
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
    (tmp_path / "wide.csv").write_text("Species,Body mass (g)\nApis mellifera,0.1\n", encoding="utf-8")
    (tmp_path / "map.toml").write_text("columns = " + "[" * 3000 + "]" * 3000 + "\n", encoding="utf-8")
    refused(tmp_path, ["import", "{tmp}/wide.csv", "-o", "{tmp}/out", "--map", "{tmp}/map.toml"],
            "map.toml", "nested more than 16 levels",
            allow=("out-import-map.csv",))  # the documented suggested map, beside the output


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


@pytest.mark.parametrize("argv", [
    ["table", str(DEMO), "-o", "{tmp}/pipe"],
    ["derive", str(DEMO), "-o", "{tmp}/pipe"],
    ["cycles", str(DEMO), "-o", "{tmp}/pipe"],
])
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
    for argv in (["table", str(DEMO), "-o", f"{{tmp}}/{long}.csv"],
                 ["audit", str(DEMO), "-o", f"{{tmp}}/{long}"],
                 ["report", str(DEMO), "-o", f"{{tmp}}/{long}/inner"],
                 ["export", str(DEMO), "--to", "dwc", "-o", f"{{tmp}}/{long}"]):
        err = refused(tmp_path, argv, "choose a shorter name", f"at most {name_max} bytes")
        assert len(err) < 1000  # the message shows the start of the name, not all of it


def test_output_name_without_room_for_the_temporary_file(tmp_path):
    """The atomic write needs a temporary name 16 bytes longer than the output's, so a name
    that fits the file system but not that is refused before any work too."""
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    refused(tmp_path, ["table", str(DEMO), "-o", "{tmp}/" + "b" * (name_max - 4)], "for an output file")


def test_output_path_longer_than_the_file_system_takes(tmp_path):
    path_max = os.pathconf(tmp_path, "PC_PATH_MAX")
    deep = "/".join(["d" * 50] * (path_max // 51 + 2))
    err = refused(tmp_path, ["table", str(DEMO), "-o", "{tmp}/" + deep + "/t.csv"], "paths of at most")
    assert len(err) < 1000


def test_a_name_just_under_the_limit_is_written(tmp_path):
    name_max = os.pathconf(tmp_path, "PC_NAME_MAX")
    name = "c" * (name_max - 16)
    proc = run_main("table", str(DEMO), "-o", str(tmp_path / name))
    assert proc.returncode == 0, proc.stderr
    assert sorted(os.listdir(tmp_path)) == [name]
