"""One registry of problem rules, and one reader per format.

The registry (comparo.base.rules) must hold every rule id the code gives a Problem, once
per condition; the same fault read through each path (a dataset folder, a dataset
workbook, a wide table for ``comparo import``, a tree file) must give the same rule id.
The faulty files are written here with the standard library and openpyxl (the reference
writer of the .xlsx format for these tests); the expected rule ids are the ones the
registry documents, not taken from the readers under test.
"""

from __future__ import annotations

import ast
import collections
import re
from pathlib import Path

import openpyxl
import pytest

import comparo
from comparo.base import errors
from comparo.base.errors import InputError, Problem
from comparo.base.rules import COLUMN_CHECKS, RULES, is_registered, rule

PACKAGE = Path(comparo.__file__).parent

SOURCES = "source_id,citation,year\ns1,Invented A. (2001) A test source,2001\n"
OBS_HEADER = ["obs_id", "taxon", "quantity", "value", "unit", "source_id", "locator", "basis"]
OBS_ROWS = [
    ["o1", "Apis mellifera", "body_mass", "100", "mg", "s1", "Table 1", "reported"],
    ["o2", "Bombus terrestris", "body_mass", "200", "mg", "s1", "Table 1", "reported"],
]
WIDE_HEADER = ["Species", "Source", "Body mass (g)"]
WIDE_ROWS = [["Apis mellifera", "s1", "0.1"], ["Bombus terrestris", "s1", "0.2"]]


# --------------------------------------------------------------------------- the registry


def _callee(node: ast.Call) -> str | None:
    f = node.func
    return f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else None


def _constants(node: ast.AST):
    """String constants a rule argument can take (a literal, either branch of ``a if c else
    b``, the operands of ``a or b``); f-strings are not rule ids."""
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        yield node
    elif isinstance(node, ast.IfExp):
        yield from _constants(node.body)
        yield from _constants(node.orelse)
    elif isinstance(node, ast.BoolOp):
        for v in node.values:
            yield from _constants(v)


def rule_ids_in_source() -> dict[str, list[str]]:
    """Every string constant the package passes as the rule of a Problem: to ``Problem``
    itself (sixth field) and to any function of the package with a parameter ``rule`` that
    builds a Problem, directly or through another such function, positionally or as
    ``rule=``. Calls resolve to a function of the same module first."""
    trees = {f: ast.parse(f.read_text(encoding="utf-8")) for f in sorted(PACKAGE.rglob("*.py"))}
    funcs: dict[tuple[Path, str], tuple[int | None, set]] = {}
    for f, tree in trees.items():
        for n in ast.walk(tree):
            if isinstance(n, ast.FunctionDef):
                args = [a.arg for a in n.args.posonlyargs + n.args.args]
                index = None
                if "rule" in args:
                    index = args.index("rule") - (args[0] in ("self", "cls"))
                calls = {_callee(c) for c in ast.walk(n) if isinstance(c, ast.Call)}
                funcs.setdefault((f, n.name), (index, calls))
    builders: dict[tuple[Path, str], int] = {}

    def position(f: Path, name: str | None) -> int | None:
        if name == "Problem":
            return 5
        if (f, name) in funcs:
            return builders.get((f, name))
        found = {i for (_, n), i in builders.items() if n == name}
        return found.pop() if len(found) == 1 else None

    changed = True
    while changed:
        changed = False
        for key, (index, calls) in funcs.items():
            if index is not None and key not in builders:
                if any(position(key[0], c) is not None for c in calls):
                    builders[key] = index
                    changed = True
    found: dict[str, list[str]] = collections.defaultdict(list)
    for f, tree in trees.items():
        for n in ast.walk(tree):
            if not isinstance(n, ast.Call):
                continue
            i = position(f, _callee(n))
            if i is None:
                continue
            values = [k.value for k in n.keywords if k.arg == "rule"]
            if len(n.args) > i:
                values.append(n.args[i])
            for v in values:
                for c in _constants(v):
                    found[c.value].append(f"{f.relative_to(PACKAGE)}:{c.lineno}")
    return found


def test_every_rule_id_in_the_source_is_registered():
    """A rule id typed anywhere in comparo is in comparo.base.rules (the scan finds the
    ids of readers, validation, import, traces, trees and settings: over a hundred)."""
    found = rule_ids_in_source()
    assert len(found) > 100
    unknown = {k: v[:2] for k, v in found.items() if not is_registered(k)}
    assert not unknown


def test_the_scan_sees_the_readers_rules():
    """The scan is not blind: it finds rule ids of each reader and of validation."""
    found = rule_ids_in_source()
    for rid in ("duplicate-column", "formula-no-value", "newick-syntax", "missing-sheet"):
        assert rid in found, rid


def test_registry_entries_are_distinct_conditions():
    """No condition twice: no two ids are the same words in another order
    (``missing-sheet``/``sheet-missing``), and no two meanings are the same sentence."""
    words = collections.Counter(frozenset(r.split("-")) for r in RULES)
    assert [w for w, n in words.items() if n > 1] == []
    meanings = collections.Counter(r.meaning.casefold().strip(" .") for r in RULES.values())
    assert [m for m, n in meanings.items() if n > 1] == []
    for r in RULES.values():
        assert r.severity in ("error", "warning", "note") and r.meaning and "\n" not in r.meaning
    for old in ("sheet-missing", "column-twice", "tree-newick", "tree-file"):
        assert old not in RULES


def test_column_rules_of_the_schema_are_registered():
    """The ids built from schema/tables.toml (``<column>-<check>``) are registered, and an
    id of another form is not."""
    for check in COLUMN_CHECKS:
        assert is_registered(f"value-{check}") and rule(f"n-{check}").severity == "error"
    assert not is_registered("no-such-rule") and not is_registered("-number")


def test_a_problem_with_an_unregistered_rule_is_refused(monkeypatch):
    """With the check on (as in this suite), Problem refuses an id outside the registry."""
    monkeypatch.setattr(errors, "CHECK_RULES", True)
    Problem("error", "f.csv", 2, "value", "x", "required-cell", "required cell is empty")
    with pytest.raises(AssertionError, match="not in comparo.base.rules"):
        Problem("error", "f.csv", 2, "value", "x", "required-cel", "typo in the id")


# --------------------------------------------------------------------------- same fault, same id


def _write_csv(path: Path, rows: list[list[str]], delimiter: str = ",") -> Path:
    path.write_text("\n".join(delimiter.join(r) for r in rows) + "\n", encoding="utf-8")
    return path


def _write_xlsx(path: Path, sheets: dict[str, list[list[str]]]) -> Path:
    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        sheet = book.create_sheet(name)
        for r in rows:
            sheet.append(r)
    book.save(path)
    return path


def _folder(tmp_path: Path, obs: list[list[str]], delimiter: str = ",") -> Path:
    folder = tmp_path / "folder"
    folder.mkdir()
    _write_csv(folder / "observations.csv", obs, delimiter)
    (folder / "sources.csv").write_text(SOURCES, encoding="utf-8")
    return folder


def _book(tmp_path: Path, obs: list[list[str]]) -> Path:
    sources = [line.split(",") for line in SOURCES.strip().split("\n")]
    folder = tmp_path / "book"
    folder.mkdir()
    return _write_xlsx(folder / "entry.xlsx", {"observations": obs, "sources": sources})


def rules_of_dataset(path: Path) -> dict[str, str]:
    """Rule id -> first message of ``comparo check`` on a dataset folder or workbook."""
    from comparo.validation.tables import check

    frame = check(path).problems
    return dict(zip(frame["rule"][::-1], frame["message"][::-1], strict=True))


def rules_of_import(wide: Path, tmp_path: Path, **options) -> dict[str, str]:
    """Rule id -> first message of ``comparo import`` of a wide table."""
    from comparo.curation.importing import import_wide

    with pytest.raises(InputError) as caught:
        import_wide(wide, tmp_path / "imported", **options)
    frame = caught.value.problems
    return dict(zip(frame["rule"][::-1], frame["message"][::-1], strict=True))


def _bare(message: str) -> str:
    """A message without the cell coordinates a workbook reader puts before it."""
    return re.sub(r"^cell [A-Z]+[0-9]+: ", "", message)


def test_a_duplicated_column_name_is_duplicate_column_on_every_path(tmp_path):
    """A header naming one column twice: dataset folder, dataset workbook, wide CSV and wide
    workbook for import all give ``duplicate-column`` with the same message form."""
    obs = [OBS_HEADER + ["taxon"], *(r + [r[1]] for r in OBS_ROWS)]
    wide = [WIDE_HEADER + ["Species"], *(r + [r[0]] for r in WIDE_ROWS)]
    paths = {
        "folder": rules_of_dataset(_folder(tmp_path, obs)),
        "workbook": rules_of_dataset(_book(tmp_path, obs)),
        "import csv": rules_of_import(_write_csv(tmp_path / "wide.csv", wide), tmp_path),
        "import xlsx": rules_of_import(
            _write_xlsx(tmp_path / "wide.xlsx", {"Sheet1": wide}), tmp_path
        ),
    }
    for name, found in paths.items():
        assert "duplicate-column" in found, name
        assert "appears more than once" in found["duplicate-column"], name


def test_a_formula_without_a_saved_result_is_formula_no_value_on_every_path(tmp_path):
    """openpyxl saves a formula without its result; the dataset workbook and the import of
    a wide workbook both say ``formula-no-value`` (not an empty required cell only)."""
    obs = [OBS_HEADER, OBS_ROWS[0], [*OBS_ROWS[1][:3], "=D2*2", *OBS_ROWS[1][4:]]]
    wide = [WIDE_HEADER, WIDE_ROWS[0], [*WIDE_ROWS[1][:2], "=C2*2"]]
    book = rules_of_dataset(_book(tmp_path, obs))
    imported = rules_of_import(_write_xlsx(tmp_path / "wide.xlsx", {"Sheet1": wide}), tmp_path)
    assert "formula-no-value" in book and "formula-no-value" in imported
    assert _bare(book["formula-no-value"]) == _bare(imported["formula-no-value"]).replace(
        "C3", "D3"
    )


def test_a_semicolon_table_is_delimiter_on_every_path(tmp_path):
    """A table saved in a decimal-comma locale (';' between fields, ',' in numbers): the
    dataset folder and the import say ``delimiter`` with the same message."""
    obs = [OBS_HEADER, *([*r[:3], r[3] + ",5", *r[4:]] for r in OBS_ROWS)]
    wide = [WIDE_HEADER, *([*r[:2], r[2].replace(".", ",")] for r in WIDE_ROWS)]
    folder = rules_of_dataset(_folder(tmp_path, obs, ";"))
    imported = rules_of_import(_write_csv(tmp_path / "wide.csv", wide, ";"), tmp_path)
    assert folder["delimiter"] == imported["delimiter"]
    assert "decimal commas" in folder["delimiter"]


def test_a_file_in_utf16_without_a_mark_is_encoding_on_every_path(tmp_path):
    """UTF-16 text without a byte-order mark: ``encoding`` from the dataset folder, the
    import and the tree reader alike."""
    folder = _folder(tmp_path, [OBS_HEADER, *OBS_ROWS])
    text = (folder / "observations.csv").read_text(encoding="utf-8")
    (folder / "observations.csv").write_bytes(text.encode("utf-16-le"))
    wide = tmp_path / "wide.csv"
    wide.write_bytes("\n".join(",".join(r) for r in [WIDE_HEADER, *WIDE_ROWS]).encode("utf-16-le"))
    tree = tmp_path / "tree.nwk"
    tree.write_bytes("(A:1,B:1);".encode("utf-16-le"))
    from comparo.phylo import read_tree

    with pytest.raises(InputError) as caught:
        read_tree(str(tree))
    found = {
        "folder": rules_of_dataset(folder),
        "import": rules_of_import(wide, tmp_path),
        "tree": dict(
            zip(caught.value.problems["rule"], caught.value.problems["message"], strict=True)
        ),
    }
    messages = {name: f["encoding"] for name, f in found.items()}
    assert len(set(messages.values())) == 1, messages


@pytest.mark.parametrize(
    ("newick", "rule_id"),
    [
        ("((A:1,B:1):1,C:1;", "newick-syntax"),
        ("(A:1,B:1));", "newick-syntax"),
        ("(A:x,B:1);", "newick-syntax"),
        ("(A:1,B:1);(C:1,D:1);", "tree-count"),
    ],
)
def test_a_bad_tree_gives_one_rule_on_every_path(tmp_path, newick, rule_id):
    """A malformed Newick tree: the tree beside a dataset folder, beside a dataset
    workbook, a tree file given to read_tree and Newick text given to read_tree give the
    same rule id and message."""
    from comparo.phylo import read_tree

    obs = [OBS_HEADER, *OBS_ROWS]
    folder = _folder(tmp_path, obs)
    book = _book(tmp_path, obs)
    for d in (folder, book.parent):
        (d / "tree.nwk").write_text(newick, encoding="utf-8")
    found = {"folder": rules_of_dataset(folder), "workbook": rules_of_dataset(book)}
    for name, given in (("file", str(folder / "tree.nwk")), ("text", newick)):
        with pytest.raises(InputError) as caught:
            read_tree(given)
        frame = caught.value.problems
        found[name] = dict(zip(frame["rule"], frame["message"], strict=True))
    messages = {name: f.get(rule_id) for name, f in found.items()}
    assert None not in messages.values() and len(set(messages.values())) == 1, messages
