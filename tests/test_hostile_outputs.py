"""Hostile output paths: nothing lost, nothing overwritten.

Every command that writes is pointed at its own input, at special files and at
paths of the wrong kind. The dataset must stay byte-identical, special files
must keep their kind, and every refusal is exit 2 naming the path.

The path checks run in this process (``support.run_main``); the writes to a FIFO, to
standard output and to character devices go through a fresh interpreter (``run_cli``), whose
file descriptors 1 and 2 are real pipes."""

from __future__ import annotations

import os
import shutil
import stat

import pytest
from support import DEMO, run_cli, run_main, tree_hash, write_dataset


@pytest.fixture
def ds(tmp_path):
    return write_dataset(tmp_path / "DS")


# (command line with {ds} for the dataset, output placed inside it)
INTO_INPUT = {
    "table-onto-observations": ["table", "{ds}", "-o", "{ds}/observations.csv"],
    "derive-onto-sources": ["derive", "{ds}", "-o", "{ds}/sources.csv"],
    "audit-into-dataset": ["audit", "{ds}", "-o", "{ds}"],
    "audit-into-subfolder": ["audit", "{ds}", "-o", "{ds}/audit"],
    "export-datapackage-onto-dataset": ["export", "{ds}", "--to", "datapackage", "-o", "{ds}"],
    "export-dwc-into-dataset": ["export", "{ds}", "--to", "dwc", "-o", "{ds}/dwc"],
    "report-into-dataset": ["report", "{ds}", "-o", "{ds}/report"],
    "table-dotdot-path": ["table", "{ds}", "-o", "{ds}/../DS/t.csv"],
}


@pytest.mark.parametrize("case", sorted(INTO_INPUT))
def test_output_inside_the_input_is_refused_and_the_input_unchanged(ds, case):
    before = tree_hash(ds)
    argv = [a.format(ds=ds) for a in INTO_INPUT[case]]
    proc = run_main(*argv)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "inside the input dataset folder" in proc.stderr and "Traceback" not in proc.stderr
    assert tree_hash(ds) == before


def test_symlinked_dataset_and_output_are_resolved(ds, tmp_path):
    link = tmp_path / "link"
    link.symlink_to(ds, target_is_directory=True)
    before = tree_hash(ds)
    for argv in (
        ["table", str(link), "-o", str(ds / "t.csv")],
        ["table", str(ds), "-o", str(link / "t.csv")],
    ):
        proc = run_main(*argv)
        assert proc.returncode == 2 and "inside the input dataset folder" in proc.stderr, (
            proc.stderr
        )
    assert tree_hash(ds) == before


def test_a_folder_holding_a_dataset_is_not_an_output_folder(ds, tmp_path):
    other = write_dataset(tmp_path / "other")
    before = tree_hash(other)
    proc = run_main("export", str(ds), "--to", "dwc", "-o", str(other))
    assert proc.returncode == 2 and "holds a dataset" in proc.stderr
    proc = run_main("demo", "-o", str(other), "--quiet")
    assert proc.returncode == 2 and "holds a dataset" in proc.stderr
    assert tree_hash(other) == before


def test_fifo_keeps_its_kind_and_receives_the_table(ds, tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    import threading

    got: list[bytes] = []
    reader = threading.Thread(target=lambda: got.append(fifo.read_bytes()))
    reader.start()
    proc = run_cli("table", str(ds), "-o", str(fifo))
    reader.join(timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert stat.S_ISFIFO(os.stat(fifo).st_mode)
    assert got and got[0].startswith(b"taxon")


def test_symlink_is_written_through_and_kept(ds, tmp_path):
    real = tmp_path / "real.csv"
    real.write_text("old\n")
    link = tmp_path / "link.csv"
    link.symlink_to(real)
    proc = run_main("table", str(ds), "-o", str(link))
    assert proc.returncode == 0, proc.stderr
    assert link.is_symlink() and os.readlink(link) == str(real)
    assert real.read_text().startswith("taxon")


@pytest.mark.parametrize("target", ["-", "/dev/stdout"])
def test_dash_and_dev_stdout_mean_standard_output(ds, target):
    proc = run_cli("table", str(ds), "-o", target)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.startswith("taxon")


def test_character_devices_are_written_in_place():
    """/dev/null stays a character device (a temp-file-and-rename would have replaced it;
    as root that destroys /dev/null for the whole machine). /dev/full gives ENOSPC, which
    is exit 2 naming the path (Linux: writes to /dev/full fail with ENOSPC, from memory)."""
    proc = run_cli("table", str(DEMO), "-o", "/dev/null")
    assert proc.returncode == 0, proc.stderr
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)
    if os.path.exists("/dev/full"):
        proc = run_cli("table", str(DEMO), "-o", "/dev/full")
        assert proc.returncode == 2 and "/dev/full" in proc.stderr and "full" in proc.stderr


def test_wrong_kinds_of_output_path(ds, tmp_path):
    a_file = tmp_path / "a_file"
    a_file.write_text("x")
    a_dir = tmp_path / "a_dir"
    a_dir.mkdir()
    cases = [
        (["table", str(ds), "-o", str(a_dir)], "is a folder"),
        (["export", str(ds), "--to", "dwc", "-o", str(a_file)], "is a file"),
        (["audit", str(ds), "-o", str(a_file)], "is a file"),
        (["table", str(ds), "-o", str(a_file / "t.csv")], "is a file, not a folder"),
        (["report", str(ds), "-o", str(a_file / "rep")], "is a file, not a folder"),
    ]
    for argv, words in cases:
        proc = run_main(*argv)
        assert proc.returncode == 2, (argv, proc.stderr)
        assert words in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    assert a_file.read_text() == "x"


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into read-only folders")
def test_read_only_folder_is_refused_before_the_work(ds, tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        proc = run_main("report", str(ds), "-o", str(ro / "rep"))
        assert proc.returncode == 2 and "not writable" in proc.stderr
    finally:
        ro.chmod(0o700)
        shutil.rmtree(ro)


def test_guard_runs_before_any_work(monkeypatch, tmp_path, ds):
    """The output check is done up front: with the report builder patched to fail if
    reached, a refused output still exits 2 (the builder never starts)."""
    import comparo.report
    from comparo import cli

    monkeypatch.setattr(
        comparo.report, "build_report", lambda *a, **k: (_ for _ in ()).throw(AssertionError("ran"))
    )
    assert cli.main(["report", str(ds), "-o", str(ds / "rep")]) == 2
