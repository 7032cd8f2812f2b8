"""comparo.validation.tables and `comparo check`: every problem found in one pass, at the
row and column a spreadsheet shows; bad files give exit 2 and one clear message."""

from __future__ import annotations

import functools
import json
import string

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support import OBS_HEADER, SOURCES, VALID_ROWS, run_cli, run_main, tree_hash, write_dataset

from comparo.validation.tables import check


def test_valid_tiny_dataset_passes(tiny):
    res = check(tiny)
    assert res.ok, res.problems.to_string()
    assert res.rows_read == len(VALID_ROWS)


def test_all_problems_found_in_one_pass(tmp_path):
    rows = list(VALID_ROWS)
    rows[0] = rows[0].replace("100,mg", "abc,mg")  # row 2: value not a number
    rows[1] = rows[1].replace(",um,", ",kPa,")  # row 3: unit of wrong dimension
    rows[3] = rows[3].replace("s2,Table 1", "s9,Table 1")  # row 5: unknown source
    folder = write_dataset(tmp_path / "d", rows)
    res = check(folder)
    found = {(p["row"], p["column"], p["rule"]) for p in res.problems.to_dict("records")}
    assert (2, "value", "value-number") in found
    assert (3, "unit", "unit-dimension") in found
    assert (5, "source_id", "source-unknown") in found
    assert res.n_errors == 3


def test_blank_lines_keep_spreadsheet_row_numbers(tmp_path):
    rows = [VALID_ROWS[0], "", ",,,,,,,,,,,,,", VALID_ROWS[1].replace("12,um", "-12,um")]
    res = check(write_dataset(tmp_path / "d", rows))
    bad = res.problems[res.problems["rule"] == "value-positive"]
    assert list(bad["row"]) == [5]


# ------------------------------------------------------------------ the malformed battery
# Each case: (name, rows or a writer, expected rule, expected row, expected column).
def _rows(i, old, new):
    rows = list(VALID_ROWS)
    rows[i] = rows[i].replace(old, new, 1)
    return rows


CELL_CASES = [
    ("value-not-number", _rows(0, "100,mg", "1oo,mg"), "value-number", 2, "value"),
    ("value-decimal-comma", _rows(0, "100,mg", '"1,5",mg'), "value-number", 2, "value"),
    ("value-censored", _rows(0, "100,mg", "<5,mg"), "value-number", 2, "value"),
    ("value-nd", _rows(0, "100,mg", "n.d.,mg"), "value-number", 2, "value"),
    ("value-inf", _rows(0, "100,mg", "inf,mg"), "value-number", 2, "value"),
    ("value-empty", _rows(0, "100,mg", ",mg"), "required-cell", 2, "value"),
    ("value-zero", _rows(1, "12,um", "0,um"), "value-positive", 3, "value"),
    ("value-negative", _rows(1, "12,um", "-3,um"), "value-positive", 3, "value"),
    ("unit-unknown", _rows(1, ",um,", ",furlong per fortnight,"), "unit-unknown", 3, "unit"),
    ("unit-dimension", _rows(1, ",um,", ",Hz,"), "unit-dimension", 3, "unit"),
    ("unit-empty", _rows(1, ",um,", ",,"), "required-cell", 3, "unit"),
    (
        "quantity-unknown",
        _rows(2, "frequency_observed", "wingbeat"),
        "quantity-unknown",
        4,
        "quantity",
    ),
    ("duplicate-obs-id", _rows(2, "o3,", "o1,"), "unique", 4, "obs_id"),
    ("source-unknown", _rows(3, ",s2,", ",nosuch,"), "source-unknown", 5, "source_id"),
    ("basis-bad", _rows(3, "reported", "measured"), "basis-enum", 5, "basis"),
    ("computed-no-inputs", _rows(5, "computed,o5", "computed,"), "computed-inputs", 7, "inputs"),
    (
        "computed-bad-inputs",
        _rows(5, "computed,o5", "computed,o5;o77"),
        "inputs-unknown",
        7,
        "inputs",
    ),
    ("proxy-no-taxon", _rows(0, "reported", "proxy"), "proxy-taxon", 2, "proxy_taxon"),
    ("n-not-integer", _rows(1, ",10,", ",2.5,"), "n-integer", 3, "n"),
    ("n-zero", _rows(1, ",10,", ",0,"), "positive", 3, "n"),
    ("uncertainty-negative", _rows(1, ",1,sd", ",-1,sd"), "nonnegative", 3, "uncertainty"),
    (
        "uncertainty-kind-bad",
        _rows(1, ",1,sd", ",1,stdev"),
        "uncertainty_kind-enum",
        3,
        "uncertainty_kind",
    ),
    (
        "temperature-not-number",
        _rows(2, ",30", ",warm"),
        "temperature_c-number",
        4,
        "temperature_c",
    ),
    ("field-count", _rows(2, "Fig. 2", "Fig. 2,extra,extra"), "field-count", 4, None),
]


@pytest.mark.parametrize("name,rows,rule,row,column", CELL_CASES, ids=[c[0] for c in CELL_CASES])
def test_malformed_cell_exit_2_names_file_row_column(tmp_path, name, rows, rule, row, column):
    folder = write_dataset(tmp_path / name, rows)
    before = tree_hash(folder)
    proc = run_main("check", str(folder), "--format", "json")
    assert proc.returncode == 2, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout
    out = json.loads(proc.stdout)
    hits = [p for p in out["problems"] if p["rule"] == rule and p["severity"] == "error"]
    assert hits, out["problems"]
    assert hits[0]["file"] == "observations.csv" and hits[0]["row"] == row
    if column:
        assert hits[0]["column"] == column
    assert tree_hash(folder) == before  # inputs unchanged on disk


def _write_bytes(folder, name, data: bytes):
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_bytes(data)
    if name != "sources.csv":
        (folder / "sources.csv").write_text(SOURCES)


FILE_CASES = [
    ("empty-file", lambda f: _write_bytes(f, "observations.csv", b""), "empty-file"),
    (
        "semicolon-decimal-comma",
        lambda f: _write_bytes(
            f,
            "observations.csv",
            (
                OBS_HEADER.replace(",", ";")
                + "\no1;Apis mellifera;body_mass;1,5;mg;;;;s1;T1;reported;;;\n"
            ).encode(),
        ),
        "delimiter",
    ),
    (
        "binary",
        lambda f: _write_bytes(f, "observations.csv", b"\x00\x01\x02garbage\x00" * 50),
        "file-format",
    ),
    (
        "xlsx-renamed",
        lambda f: _write_bytes(f, "observations.csv", b"PK\x03\x04" + b"\x00" * 100),
        "file-format",
    ),
    (
        "missing-columns",
        lambda f: write_dataset(f, ["o1,Apis mellifera,12"], header="obs_id,taxon,value"),
        "missing-column",
    ),
    (
        "duplicate-column",
        lambda f: write_dataset(f, [VALID_ROWS[0] + ",x"], header=OBS_HEADER + ",value"),
        "duplicate-column",
    ),
    ("no-sources", lambda f: (write_dataset(f), (f / "sources.csv").unlink()), "missing-file"),
    ("no-observations", lambda f: _write_bytes(f, "sources.csv", SOURCES.encode()), "missing-file"),
    (
        "bad-toml",
        lambda f: (
            write_dataset(f),
            (f / "comparo.toml").write_text("reference_temperature_c = = 3\n"),
        ),
        "toml-syntax",
    ),
    (
        "bad-newick",
        lambda f: (write_dataset(f), (f / "tree.nwk").write_text("((A:1,B:2):1,(C:1\n")),
        "newick-syntax",
    ),
    (
        "bad-bibtex",
        lambda f: (
            write_dataset(f),
            (f / "sources.csv").unlink(),
            (f / "sources.bib").write_text("@article{s1, title={unclosed, year=2000}\n"),
        ),
        "bibtex-syntax",
    ),
    (
        "bad-user-quantity",
        lambda f: (
            write_dataset(f),
            (f / "comparo.toml").write_text('[quantities.twitch]\nunit = "blorp"\n'),
        ),
        "quantity-unit",
    ),
]


@pytest.mark.parametrize("name,make,rule", FILE_CASES, ids=[c[0] for c in FILE_CASES])
def test_bad_files_exit_2_with_clear_message(tmp_path, name, make, rule):
    folder = tmp_path / name
    make(folder)
    before = tree_hash(folder)
    proc = run_main("check", str(folder))
    assert proc.returncode == 2, proc.stdout + proc.stderr
    text = proc.stdout + proc.stderr
    assert "Traceback" not in text
    assert rule in text
    assert tree_hash(folder) == before


def test_missing_folder_exit_2(tmp_path):
    proc = run_cli(
        "check", str(tmp_path / "nope")
    )  # the real entry point: exit status of the process
    assert (
        proc.returncode == 2 and "does not exist" in proc.stderr and "Traceback" not in proc.stderr
    )


def test_warnings_do_not_fail_but_strict_does(tmp_path):
    folder = write_dataset(tmp_path / "w", _rows(2, ",30", ","))  # frequency without temperature
    assert run_main("check", str(folder)).returncode == 0
    assert run_main("check", str(folder), "--strict").returncode == 1


def test_encodings_utf16_bom_and_latin1(tmp_path):
    text = (
        OBS_HEADER + "\n" + "\n".join(VALID_ROWS).replace("Apis mellifera", "Apis melliféra") + "\n"
    )
    for enc, expect_warning in (("utf-16", False), ("utf-8-sig", False), ("cp1252", True)):
        f = tmp_path / enc
        _write_bytes(f, "observations.csv", text.encode(enc))
        res = check(f)
        assert res.ok, res.problems.to_string()
        assert ("encoding" in set(res.problems["rule"])) is expect_warning


def test_tsv_and_xlsx_read_like_csv(tmp_path):
    import pandas as pd

    tsv = tmp_path / "tsv"
    _write_bytes(
        tsv,
        "observations.tsv",
        (OBS_HEADER + "\n" + "\n".join(VALID_ROWS) + "\n").replace(",", "\t").encode(),
    )
    assert check(tsv).ok
    xl = tmp_path / "xl"
    xl.mkdir()
    frame = pd.read_csv(
        write_dataset(tmp_path / "src") / "observations.csv", dtype=str, keep_default_na=False
    )
    with pd.ExcelWriter(xl / "observations.xlsx") as w:
        pd.DataFrame({"a": [1]}).to_excel(w, sheet_name="notes", index=False)
        frame.to_excel(w, sheet_name="observations", index=False)
    (xl / "sources.csv").write_text(SOURCES)
    res = check(xl)
    assert res.ok, res.problems.to_string()
    assert res.rows_read == len(VALID_ROWS)


def test_bibtex_sources(tmp_path):
    folder = write_dataset(tmp_path / "bib")
    (folder / "sources.csv").unlink()
    (folder / "sources.bib").write_text(
        "@article{s1, author={Invented, A.}, title={One}, journal={J}, year={2001}, "
        "doi={10.1000/xyz}}\n@book{s2, title={Two}, year=2002}\n"
    )
    res = check(folder)
    assert res.ok, res.problems.to_string()


def test_warnings_doi_binomial_range_temperature(tmp_path):
    rows = _rows(1, "12,um", "12,mm")  # 12 mm radius: outside the plausible range
    rows = [r.replace("Bombus terrestris", "bumblebee") for r in rows]
    folder = write_dataset(
        tmp_path / "w", rows, sources=SOURCES.replace("10.1000/abc", "doi-missing")
    )
    res = check(folder)
    assert res.ok
    rules = set(res.problems["rule"])
    assert {"out-of-range", "taxon-binomial", "doi-format"} <= rules


# ------------------------------------------------------------------ property tests
names = st.from_regex(r"[A-Z][a-z]{2,8} [a-z]{3,9}", fullmatch=True)
good_row = st.tuples(
    names,
    st.sampled_from([("body_mass", "mg"), ("fiber_radius", "um"), ("lattice_spacing_d10", "nm")]),
    st.floats(min_value=1e-3, max_value=1e3, allow_nan=False),
    st.sampled_from(["s1", "s2"]),
    st.sampled_from(["reported", "digitized"]),
)
BAD_CELLS = [
    ("value", "x1"),
    ("value", "-4"),
    ("unit", "parsec per hertz"),
    ("source_id", "zzz"),
    ("basis", "guessed"),
    ("quantity", "wing_colour"),
]


def _table(rows):
    lines = []
    for i, (taxon, (q, u), v, s, b) in enumerate(rows):
        lines.append(f"o{i},{taxon},{q},{v!r},{u},,,,{s},Table 1,{b},,,")
    return lines


@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(rows=st.lists(good_row, min_size=1, max_size=12), data=st.data())
def test_property_valid_rows_pass_and_one_bad_cell_is_found(tmp_path_factory, rows, data):
    folder = write_dataset(tmp_path_factory.mktemp("prop"), _table(rows))
    res = check(folder)
    assert res.ok, res.problems.to_string()
    i = data.draw(st.integers(0, len(rows) - 1))
    column, bad = data.draw(st.sampled_from(BAD_CELLS))
    lines = _table(rows)
    cols = OBS_HEADER.split(",")
    cells = lines[i].split(",")
    cells[cols.index(column)] = bad
    lines[i] = ",".join(cells)
    res = check(write_dataset(tmp_path_factory.mktemp("bad"), lines))
    errors = res.problems[res.problems["severity"] == "error"]
    assert len(errors) >= 1
    assert set(errors["row"]) == {i + 2}
    assert set(errors["column"]) == {column}


@settings(
    max_examples=20, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.text(alphabet=string.printable + "µ²é", max_size=30))
def test_property_any_cell_text_never_crashes(tmp_path_factory, text):
    cell = '"' + text.replace('"', '""') + '"'
    rows = list(VALID_ROWS)
    rows[0] = rows[0].replace("100,mg", f"{cell},mg")
    res = check(write_dataset(tmp_path_factory.mktemp("any"), rows))
    assert res.rows_read >= 1


def test_text_view_caps_rows_per_rule_and_all_lists_them(tmp_path, capsys):
    """30 digitized rows: text shows 25 of that rule and counts the rest; --all and csv show all
    30."""
    from comparo.cli.main import main

    rows = [
        f"d{i},Taxon{i} alpha,body_mass,{i + 1},mg,,,,s1,Fig. {i},digitized,,," for i in range(30)
    ]
    folder = write_dataset(tmp_path / "many", rows=rows)
    assert main(["check", str(folder)]) == 0
    out = capsys.readouterr().out
    assert out.count("[basis-digitized]") == 26  # 25 rows plus the "more" line
    assert "and 5 more note(s) [basis-digitized] not shown" in out
    assert main(["check", str(folder), "--all"]) == 0
    out = capsys.readouterr().out
    assert out.count("[basis-digitized]") == 30 and "not shown" not in out
    assert main(["check", str(folder), "--format", "csv"]) == 0
    assert capsys.readouterr().out.count("basis-digitized") == 30


def _imports(module: str) -> set[str]:
    """Every comparo module *module* imports, at the top or inside a function."""
    import ast
    import importlib.util

    src = open(importlib.util.find_spec(module).origin, encoding="utf-8").read()
    out = set()
    for node in ast.walk(ast.parse(src)):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("comparo"):
            out.add(node.module)
        elif isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("comparo"))
    return out


def test_reading_never_imports_validation():
    """One-way flow: reading returns raw tables; validation imports reading; the
    dataset module sits on both (no import cycle, not even a lazy one)."""
    assert not _imports("comparo.reading.tables") & {
        "comparo.validation.tables",
        "comparo.validation.dataset",
        "comparo.curation.harmonise",
    }
    assert "comparo.reading.tables" in _imports("comparo.validation.tables")
    assert "comparo.validation.dataset" not in _imports("comparo.validation.tables")
    assert {"comparo.reading.tables", "comparo.validation.tables"} <= _imports(
        "comparo.validation.dataset"
    )
    import comparo
    from comparo.validation.dataset import Dataset, load

    assert comparo.load is load and comparo.Dataset is Dataset


def test_check_result_shows_itself_in_a_notebook(tiny):
    from comparo.validation.dataset import check

    res = check(tiny)
    html = res._repr_html_()
    assert "<table" in html and res.summary().split(":")[-1].strip() in html


# --- the declared pandera rules, run column-wise, against pandera's own lazy validation
# (independent route: pandera's validation backends report the failure cases) ---------------

_HOSTILE = [
    "",
    "abc",
    "2.5",
    "-1",
    "0",
    "1e400",
    "nan",
    "12 um",
    "±3",
    "zz",
    "sd",
    "ci95",
    "9" * 20,
    "OBS0001",
    "measured",
    " 3",
    "<5",
    "1,5",
]


@functools.lru_cache(maxsize=1)
def _demo_raw():
    """The demo folder as read (once per test process; callers copy the frames they change)."""
    from support import DEMO

    from comparo.reading.tables import read_folder

    return read_folder(DEMO)


def _pandera_failures(schema, frame) -> list[tuple]:
    import pandera.errors as pe

    try:
        schema.validate(frame, lazy=True)
        return []
    except pe.SchemaErrors as exc:
        fc = exc.failure_cases
    recs = []
    for r in fc.to_dict("records"):
        idx = r["index"]
        recs.append(
            (
                r["column"],
                str(r["check"]),
                None if idx is None else int(idx),
                None if r["failure_case"] is None else str(r["failure_case"]),
            )
        )
    return recs


def _ours(name, frame) -> list[tuple]:
    from comparo.validation.tables import column_rules, schema_failures

    return [
        (
            r["column"],
            r["check"],
            None if r["index"] is None else int(r["index"]),
            None if r["failure_case"] is None else str(r["failure_case"]),
        )
        for r in schema_failures(column_rules(name), frame)
    ]


@settings(max_examples=25, deadline=None)
@given(data=st.data())
def test_schema_failures_match_pandera_validation(data):
    """Random hostile cells and dropped columns in the demo's three tables: the same failure
    cases as pandera's ``validate(lazy=True)``, as a multiset, and the same order per column."""
    from comparo.validation.tables import pandera_schema

    raw = _demo_raw()
    for name, table in (
        ("observations", raw.observations),
        ("sources", raw.sources),
        ("taxa", raw.taxa),
    ):
        frame = table.frame.copy()
        n_bad = data.draw(st.integers(0, 12), label=f"{name} bad cells")
        for _ in range(n_bad):
            r = data.draw(st.integers(0, len(frame) - 1))
            c = data.draw(st.sampled_from(list(frame.columns)))
            frame.iat[r, frame.columns.get_loc(c)] = data.draw(st.sampled_from(_HOSTILE))
        drop = data.draw(st.lists(st.sampled_from(list(frame.columns)), max_size=2, unique=True))
        frame = frame.drop(columns=drop)
        theirs, ours = _pandera_failures(pandera_schema(name), frame), _ours(name, frame)
        assert sorted(ours, key=repr) == sorted(theirs, key=repr)
        for col in {c for c, *_ in theirs}:
            assert [t for t in ours if t[0] == col] == [t for t in theirs if t[0] == col]


def test_schema_failures_of_a_known_bad_table_match_pandera():
    """Fixed case with one of each kind of failure, so the comparison above is never empty."""
    from support import DEMO

    from comparo.reading.tables import read_folder
    from comparo.validation.tables import pandera_schema

    frame = read_folder(DEMO).observations.frame.copy()
    frame.loc[3, "value"], frame.loc[5, "value"], frame.loc[2, "n"] = "abc", "", "2.5"
    frame.loc[7, "basis"], frame.loc[1, "obs_id"] = "zz", frame.loc[0, "obs_id"]
    frame = frame.drop(columns=["source_id"])
    theirs = _pandera_failures(pandera_schema("observations"), frame)
    assert len(theirs) == 6
    assert sorted(_ours("observations", frame), key=repr) == sorted(theirs, key=repr)


# --- the whole-file shortcuts of the text reader skip only passes that cannot change a cell ---


@pytest.mark.parametrize(
    "text, cells",
    [
        ("a,b\n 1 ,2\n", ["1", "2"]),  # blanks around a cell
        ('a,b\n"\n1",2\n', ["1", "2"]),  # a quoted cell that starts with a line break
        ("a,b\n1\x0b1,2\n", None),  # a control character inside a cell (an error)
        ("a,b\n1\u00a0,2\n", ["1", "2"]),  # a no-break space (Unicode whitespace)
        ("a,b\ncafe\u0301,2\n", ["caf\u00e9", "2"]),  # decomposed accent -> NFC
        ("a,b\n1.5,2e-3\n", ["1.5", "2e-3"]),  # plain ASCII numbers: every pass skipped
    ],
)
def test_text_reader_shortcuts_give_the_same_cells_as_the_full_passes(tmp_path, text, cells):
    """Reading with the whole-file facts and with every per-cell pass forced gives the same
    table and the same problems."""
    from comparo.reading import tables as io

    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    fast, p_fast = io.read_text_table(path)
    real = io._TextFacts.of
    try:
        io._TextFacts.of = classmethod(lambda cls, t: cls())  # every pass on
        full, p_full = io.read_text_table(path)
    finally:
        io._TextFacts.of = real
    assert (
        fast.frame.equals(full.frame)
        and fast.rows == full.rows
        and fast.respelled == full.respelled
    )
    assert p_fast == p_full
    if cells is not None:
        assert fast.frame.iloc[0].tolist() == cells
    else:
        assert any(p.rule == "control-character" for p in p_fast)
