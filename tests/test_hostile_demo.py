"""Hostile demo output folders: a rerun into an earlier demo folder never deletes or
replaces what the user added or changed; a compilation folder that is a file or a link,
and an output that is a file or a link to no folder, are refused with exit 2 before any
write. The cases are our own; the rule is the one of docs/cli.md (demo)."""

from __future__ import annotations

import json

import pytest
from hostile_tools import changed_outside, snapshot
from support import DEMO, run_main, write_dataset

from comparo.base.errors import UsageError
from comparo.cli.commands.demo import MANIFEST, copy_demo


def test_a_rerun_keeps_the_users_files_and_replaces_only_unchanged_demo_files(tmp_path):
    out = tmp_path / "out"
    copy_demo(out)
    data = out / "synthetic_cyclers"
    assert sorted(p.name for p in data.iterdir()) == sorted(
        p.name for p in DEMO.iterdir() if p.is_file()
    )
    recorded = json.loads((out / MANIFEST).read_text(encoding="utf-8"))["files"]
    assert set(recorded) == {f"synthetic_cyclers/{p.name}" for p in DEMO.iterdir() if p.is_file()}
    (data / "my_notes.txt").write_text("mine", encoding="utf-8")
    (data / "extra").mkdir()
    (data / "extra" / "x.csv").write_text("a\n1\n", encoding="utf-8")
    (out / "mine.txt").write_text("mine too", encoding="utf-8")
    before = snapshot(tmp_path)
    copy_demo(out)
    assert changed_outside(before, snapshot(tmp_path)) == []  # the demo files were as written


def test_a_demo_file_changed_by_the_user_stops_the_rerun(tmp_path):
    out = tmp_path / "out"
    copy_demo(out)
    obs = out / "synthetic_cyclers" / "observations.csv"
    obs.write_text(obs.read_text(encoding="utf-8") + "# my edit\n", encoding="utf-8")
    (
        out / "synthetic_cyclers" / "taxa.csv"
    ).unlink()  # a removed demo file is written again: not the user's
    before = snapshot(tmp_path)
    proc = run_main("demo", "-o", str(out), "--quiet")
    assert proc.returncode == 2
    assert (
        "holds demo files changed since comparo wrote them (synthetic_cyclers/observations.csv)"
        in proc.stderr
    )
    assert changed_outside(before, snapshot(tmp_path)) == []


def test_an_older_demo_folder_without_a_manifest_is_not_replaced_when_it_differs(tmp_path):
    out = tmp_path / "out"
    copy_demo(out)
    (out / MANIFEST).unlink()
    (out / "synthetic_cyclers" / "README.md").write_text("my own readme\n", encoding="utf-8")
    with pytest.raises(UsageError, match="README.md"):
        copy_demo(out)


@pytest.mark.parametrize("kind", ["file", "link-to-dataset", "dangling-link", "link-to-file"])
def test_a_compilation_folder_that_is_not_a_folder_is_refused(tmp_path, kind):
    out = tmp_path / "out"
    out.mkdir()
    ds = write_dataset(tmp_path / "DS")
    target = out / "synthetic_cyclers"
    if kind == "file":
        target.write_text("mine", encoding="utf-8")
    elif kind == "link-to-dataset":
        target.symlink_to(ds, target_is_directory=True)
    elif kind == "dangling-link":
        target.symlink_to(tmp_path / "nowhere")
    else:
        target.symlink_to(ds / "sources.csv")
    before = snapshot(tmp_path)
    proc = run_main("demo", "-o", str(out), "--quiet")
    assert proc.returncode == 2, proc.stderr
    assert (
        f"{target} is a" in proc.stderr
        and "the demo writes its compilation folder there" in proc.stderr
    )
    assert changed_outside(before, snapshot(tmp_path)) == []


@pytest.mark.parametrize("kind", ["file", "dangling-link", "link-to-file"])
def test_an_output_that_is_not_a_folder_is_refused(tmp_path, kind):
    out = tmp_path / "out"
    (tmp_path / "f.txt").write_text("mine", encoding="utf-8")
    if kind == "file":
        out.write_text("mine", encoding="utf-8")
    elif kind == "dangling-link":
        out.symlink_to(tmp_path / "nowhere")
    else:
        out.symlink_to(tmp_path / "f.txt")
    before = snapshot(tmp_path)
    proc = run_main("demo", "-o", str(out), "--quiet")
    assert proc.returncode == 2, proc.stderr
    assert "internal error" not in proc.stderr
    assert (
        "is a file; this command writes a folder" in proc.stderr
        or "which is not a folder" in proc.stderr
    )
    assert changed_outside(before, snapshot(tmp_path)) == []
