"""Hostile output paths through symbolic links: an output folder, or a file or subfolder
inside it, that is a link to an input (a dataset folder, its sources table, the wide
sheet, a sources file). Every write is resolved, links followed, and refused with exit 2
when it lands on or inside an input; the inputs stay byte-identical and nothing appears
anywhere but the output. The rule is the one of docs/cli.md (outputs never land in
inputs); the cases are our own."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from hostile_tools import changed_outside, snapshot
from support import run_main, write_dataset

WIDE = "Species,Body mass (g),Source\nApis mellifera,0.1,s1\nBombus terrestris,0.2,s1\n"


@pytest.fixture
def room(tmp_path):
    """tmp/DS (a dataset), tmp/wide.csv, tmp/refs.csv and an empty tmp/out."""
    write_dataset(tmp_path / "DS")
    (tmp_path / "wide.csv").write_text(WIDE, encoding="utf-8")
    (tmp_path / "refs.csv").write_text(
        "source_id,citation\ns1,Invented A. (2001) One\n", encoding="utf-8"
    )
    (tmp_path / "out").mkdir()
    return tmp_path


def link(at: Path, to: Path) -> None:
    at.parent.mkdir(parents=True, exist_ok=True)
    at.symlink_to(to, target_is_directory=to.is_dir())


# (links to make inside tmp: path -> target, command line; {t} is tmp)
CASES = {
    "audit-file-link-to-sources": (
        {"out/sources.csv": "DS/sources.csv"},
        ["audit", "{t}/DS", "-o", "{t}/out"],
    ),
    "audit-file-link-to-observations": (
        {"out/coverage.csv": "DS/observations.csv"},
        ["audit", "{t}/DS", "-o", "{t}/out"],
    ),
    "audit-last-file-link": (
        {"out/lineage.csv": "DS/lineage.csv"},
        ["audit", "{t}/DS", "-o", "{t}/out"],
    ),
    "report-tables-link-to-dataset": ({"out/tables": "DS"}, ["report", "{t}/DS", "-o", "{t}/out"]),
    "report-figures-link-to-dataset": (
        {"out/figures": "DS"},
        ["report", "{t}/DS", "-o", "{t}/out"],
    ),
    "report-html-link-to-observations": (
        {"out/report.html": "DS/observations.csv"},
        ["report", "{t}/DS", "-o", "{t}/out"],
    ),
    "export-dwc-file-link": (
        {"out/measurementorfact.csv": "DS/observations.csv"},
        ["export", "{t}/DS", "--to", "dwc", "-o", "{t}/out"],
    ),
    "export-datapackage-file-link": (
        {"out/sources.csv": "DS/sources.csv"},
        ["export", "{t}/DS", "--to", "datapackage", "-o", "{t}/out"],
    ),
    "import-overwrite-observations-link-to-wide": (
        {"out/observations.csv": "wide.csv"},
        ["import", "{t}/wide.csv", "-o", "{t}/out", "--overwrite"],
    ),
    "import-overwrite-sources-link-to-sources": (
        {"out/sources.csv": "refs.csv"},
        ["import", "{t}/wide.csv", "-o", "{t}/out", "--overwrite", "--sources", "{t}/refs.csv"],
    ),
    "import-overwrite-toml-link-to-wide": (
        {"out/import.toml": "wide.csv"},
        ["import", "{t}/wide.csv", "-o", "{t}/out", "--overwrite"],
    ),
    "table-parent-link-to-dataset": (
        {"out/sub": "DS"},
        ["table", "{t}/DS", "-o", "{t}/out/sub/t.csv"],
    ),
    "derive-file-link-to-sources": (
        {"out/d.csv": "DS/sources.csv"},
        ["derive", "{t}/DS", "-o", "{t}/out/d.csv"],
    ),
    "cycles-file-link-to-observations": (
        {"out/c.json": "DS/observations.csv"},
        ["cycles", "{t}/DS", "--format", "json", "-o", "{t}/out/c.json"],
    ),
    "template-link-into-dataset": (
        {"out/t.xlsx": "DS/t.xlsx"},
        ["template", "-o", "{t}/out/t.xlsx", "--dataset", "{t}/DS"],
    ),
    "demo-folder-link-to-dataset": (
        {"out/synthetic_cyclers": "DS"},
        ["demo", "-o", "{t}/out", "--quiet"],
    ),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_a_link_to_an_input_is_refused_and_nothing_changes(room, case):
    links, argv = CASES[case]
    for at, to in links.items():
        link(room / at, room / to)
    before = snapshot(room)
    proc = run_main(*[a.format(t=room) for a in argv])
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stderr and "internal error" not in proc.stderr
    assert (
        "inside the input dataset folder" in proc.stderr
        or "is the input file" in proc.stderr
        or "is a symbolic link" in proc.stderr
    ), proc.stderr
    assert (
        changed_outside(before, snapshot(room)) == []
    )  # not even inside out: refused before any write


def test_the_message_names_the_link_and_where_it_leads(room):
    link(room / "out" / "sources.csv", room / "DS" / "sources.csv")
    proc = run_main("audit", str(room / "DS"), "-o", str(room / "out"))
    assert proc.returncode == 2
    assert f"{room / 'out' / 'sources.csv'} (through a symbolic link, it is" in proc.stderr
    assert (
        "inside the input dataset folder" in proc.stderr
        and "comparo never writes into its inputs" in proc.stderr
    )


def test_a_link_to_somewhere_else_is_written_through(room):
    """A link that leads outside every input is an ordinary output path (written through,
    the link kept): the refusal is about inputs, not about links."""
    (room / "elsewhere").mkdir()
    link(room / "out" / "coverage.csv", room / "elsewhere" / "coverage.csv")
    before = snapshot(room)
    proc = run_main("audit", str(room / "DS"), "-o", str(room / "out"), "--format", "json")
    assert proc.returncode == 0, proc.stderr
    assert (room / "out" / "coverage.csv").is_symlink()
    assert (room / "elsewhere" / "coverage.csv").read_text(encoding="utf-8").startswith("taxon")
    assert changed_outside(before, snapshot(room), ("out", "elsewhere/coverage.csv")) == []


def test_python_api_refuses_the_same_links(room):
    """The API answers as the CLI: build_report and import_wide protect their inputs."""
    from comparo.base.errors import UsageError
    from comparo.curation.importing import import_wide
    from comparo.pipeline import build_report

    link(room / "out" / "tables", room / "DS")
    before = snapshot(room)
    with pytest.raises(UsageError, match="inside the input dataset folder"):
        build_report(room / "DS", room / "out")
    (room / "out2").mkdir()
    link(room / "out2" / "observations.csv", room / "wide.csv")
    with pytest.raises(UsageError, match="is the input file"):
        import_wide(room / "wide.csv", room / "out2", overwrite=True)
    assert changed_outside(before, snapshot(room), ("out2",)) == []
    assert os.readlink(room / "out2" / "observations.csv") == str(room / "wide.csv")
