"""The tree and the taxa table agree, or check says why: one accepted taxon on two tips
is an error naming both labels; a taxon without a tip is a warning with the nearest tip;
the folder reader and ``fit --tree`` are one reader (deep trees included)."""

from __future__ import annotations

import json

from support import run_main, tree_hash, write_dataset

TREE = "((Apis_mellifera:1,Bombus_terrestris:1):1,Musca_domestica:2);\n"


def _ds(tmp_path, taxa: str | None, tree: str = TREE):
    ds = write_dataset(tmp_path / "ds")
    (ds / "tree.nwk").write_text(tree, encoding="utf-8")
    if taxa is not None:
        (ds / "taxa.csv").write_text(taxa, encoding="utf-8")
    return ds


def _problems(ds):
    proc = run_main("check", str(ds), "--format", "json")
    return proc, json.loads(proc.stdout)["problems"]


def test_one_accepted_taxon_on_two_tips_is_an_error_naming_both(tmp_path):
    """Bombus terrestris is the accepted name of the synonym 'Musca domestica' here (a
    curation slip): the tree holds the species on two tips. Check exits 2 naming both
    tips; a PGLS fit refuses too instead of silently pruning one tip."""
    taxa = (
        "taxon,accepted_name,tree_label\nBombus terrestris,,Bombus_terrestris\nMusca domestica,"
        "Bombus terrestris,\n"
    )
    ds = _ds(tmp_path, taxa)
    before = tree_hash(ds)
    proc, probs = _problems(ds)
    assert proc.returncode == 2
    two = [p for p in probs if p["rule"] == "tree-two-tips"]
    assert (
        len(two) == 1
        and "Bombus_terrestris" in two[0]["message"]
        and "Musca_domestica" in two[0]["message"]
    )
    assert two[0]["file"] == "taxa.csv" and two[0]["row"] == 2
    fit = run_main(
        "fit", str(ds), "--x", "body_mass", "--y", "frequency_observed", "--method", "pgls"
    )
    assert fit.returncode == 2 and "tree-two-tips" in fit.stderr, fit.stderr
    assert tree_hash(ds) == before


def test_a_taxon_without_a_tip_is_warned_with_the_nearest_label(tmp_path):
    """A one-letter typo in the tree ('Apis_melifera') would silently drop the taxon from
    a PGLS fit: check warns and suggests the tip."""
    ds = _ds(tmp_path, None, tree="((Apis_melifera:1,Bombus_terrestris:1):1,Musca_domestica:2);\n")
    proc, probs = _problems(ds)
    assert proc.returncode == 0, probs
    warn = [p for p in probs if p["rule"] == "taxon-without-tip"]
    assert [p["value"] for p in warn] == ["Apis mellifera"]
    assert "Apis_melifera" in warn[0]["hint"] and warn[0]["severity"] == "warning"


def test_duplicate_tip_label_is_named(tmp_path):
    ds = _ds(tmp_path, None, tree="((Apis_mellifera:1,Apis_mellifera:1):1,Musca_domestica:2);\n")
    proc, probs = _problems(ds)
    assert proc.returncode == 2
    assert any("Apis_mellifera" in p["message"] and "duplicate" in p["message"] for p in probs), (
        probs
    )


def test_deep_tree_in_a_dataset_folder_is_read_by_the_same_reader(tmp_path):
    """A ladder tree 20,000 levels deep in tree.nwk: the folder reader handles it like
    ``fit --tree`` (both go through comparo.reading.tables.parse_newick)."""
    n = 20_000
    text = "Apis_mellifera:1"
    for i in range(n):
        text = f"({text},t{i}:1):1"
    ds = _ds(tmp_path, None, tree=text + ";\n")
    proc, probs = _problems(ds)
    assert proc.returncode == 0, [p for p in probs if p["severity"] == "error"]
    assert not [p for p in probs if p["rule"] in ("newick-depth", "newick-syntax")]
