"""What the column headers of a curator's wide table mean, and the map file that records it.

Each header is matched to what it holds: a catalogue quantity (by key, label or synonym,
case- and spelling-tolerantly), the spread or sample size of one, or one of the long-format
columns (taxon, source, locator, temperature, n ...). Nothing is guessed: a header that
matches nothing, or more than one quantity, stays unresolved with its closest candidates,
for the curator to decide in a map file (:func:`read_map`, :func:`apply_map`,
:func:`map_text`). The table itself is read by :mod:`comparo.reading.sheets`.
"""

from __future__ import annotations

import csv
import difflib
import io as _io
import re
from dataclasses import dataclass, field, replace
from functools import lru_cache
from pathlib import Path
from typing import Any

from comparo.base.catalog import Catalog
from comparo.base.errors import Problem, problem
from comparo.reading.settings import MAX_SETTINGS_DEPTH, nesting, too_deep
from comparo.reading.text import decode_bytes, nfc
from comparo.reading.workbook import column_letter

UNCERTAINTY_ROLES = ("sd", "se", "ci95", "range_half")
ROLES = (
    "value",
    *UNCERTAINTY_ROLES,
    "n",
    "source",
    "locator",
    "taxon",
    "temperature",
    "taxa",
    "column",
    "ignore",
)
# long-format columns a wide column may be copied into, one value per wide row
COPY_COLUMNS = ("preparation", "muscle", "notes", "basis", "entered_by", "entered_on", "q10")
BASES = ("reported", "computed", "digitized", "proxy", "assumed")
MAP_COLUMNS = ("header", "role", "key", "unit", "basis", "candidates")


# --------------------------------------------------------------------------- headers


def normalise(text: str) -> str:
    """A header or name for matching: case-folded, British spellings American
    (fibre -> fiber), apostrophes, dots and commas dropped, other punctuation a space."""
    t = nfc(str(text)).casefold().replace("μ", "µ").replace("±", " pm ").replace("+/-", " pm ")
    t = re.sub(r"fibre", "fiber", t)
    t = re.sub(r"[’'`.,]", "", t)
    t = re.sub(r"[^0-9a-zµ]+", " ", t)
    return " ".join(t.split())


# whole-header names of the long-format columns (normalised form)
_ROLE_NAMES: dict[str, tuple[str, str]] = {}
for _role, _key, _names in (
    ("taxon", "", "taxon|taxa|species|species name|scientific name|binomial|organism|taxon name"),
    (
        "source",
        "",
        "source|source id|sources|reference|references|ref|refs|citation|citation "
        "key|study|paper|source key",
    ),
    (
        "locator",
        "",
        "locator|where|where in source|table|figure|fig|page|pages|table figure|table or "
        "figure|location in source",
    ),
    ("temperature", "degC", "temperature c|temp c|t c"),
    ("temperature", "", "temperature|temp|measurement temperature|test temperature"),
    ("n", "", "n|sample size|n individuals|number of individuals"),
    ("taxa", "accepted_name", "accepted name|accepted"),
    ("taxa", "tree_label", "tree label|tip label"),
    ("taxa", "thermoregulation", "thermoregulation|thermal strategy"),
    (
        "taxa",
        "operating_temperature_c",
        "operating temperature|operating temperature c|body temperature|thoracic temperature",
    ),
    ("column", "q10", "q10|q 10"),
    ("column", "preparation", "preparation|prep"),
    ("column", "muscle", "muscle|tissue"),
    ("column", "notes", "notes|note|comment|comments|remarks"),
    ("column", "basis", "basis"),
    ("column", "entered_by", "entered by|curator"),
    ("column", "entered_on", "entered on|date entered"),
):
    for _n in _names.split("|"):
        _ROLE_NAMES[_n] = (_role, _key)
GROUP_NAMES = (
    "clade",
    "group",
    "family",
    "order",
    "class",
    "genus",
    "subfamily",
    "superfamily",
    "phylum",
    "tribe",
    "lineage",
    "suborder",
    "infraorder",
    "subclass",
)

# words before or after a trait name that make the column that trait's spread, n, source or locator
_SUFFIXES: list[tuple[str, str]] = sorted(
    [(w, "sd") for w in ("sd", "sds", "std", "stdev", "std dev", "standard deviation")]
    + [(w, "se") for w in ("se", "sem", "standard error", "std error", "std err")]
    + [(w, "ci95") for w in ("ci95", "95 ci", "ci 95", "95 confidence interval")]
    + [(w, "range_half") for w in ("range half", "half range")]
    + [(w, "?spread") for w in ("error", "err", "uncertainty", "spread", "pm")]
    + [(w, "n") for w in ("n", "sample size")]
    + [(w, "source") for w in ("source", "ref", "reference")]
    + [(w, "locator") for w in ("locator", "where", "table", "figure", "fig", "page")],
    key=lambda p: -len(p[0]),
)

_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*[\(\[](?P<unit>[^()\[\]]*)[\)\]]\s*$")


def split_unit(header: str) -> tuple[str, str]:
    """``'Body mass SD (g)'`` -> ``('Body mass SD', 'g')``; no brackets: ``(header, '')``."""
    m = _UNIT_RE.match(header.strip())
    if not m or not m.group("name").strip():
        return header.strip(), ""
    return m.group("name").strip(), m.group("unit").strip()


@dataclass(frozen=True)
class Column:
    """What one wide column holds. ``role`` is one of :data:`ROLES`, or ``''`` while
    unresolved (then ``problem`` says why and ``candidates`` are the closest keys)."""

    header: str
    index: int
    role: str = ""
    # quantity (value, spread, per-trait n/source/locator); taxa column (taxa); long column
    # (column)
    key: str = ""
    unit: str = ""
    basis: str = ""
    how: str = ""  # how the header was matched: key, label, synonym, column name, map file ...
    candidates: tuple[str, ...] = ()
    problem: str = ""

    @property
    def letter(self) -> str:
        return column_letter(self.index)

    def to_dict(self) -> dict[str, Any]:
        return {
            "header": self.header,
            "column": self.letter,
            "role": self.role,
            "key": self.key,
            "unit": self.unit,
            "basis": self.basis,
            "how": self.how,
        }


@dataclass(frozen=True)
class NameIndex:
    """Normalised names -> quantity keys, with how each name was derived."""

    names: dict[str, dict[str, str]] = field(default_factory=dict)  # name -> {key: how}

    kinds: dict[str, str] = field(
        default_factory=dict
    )  # key -> kind (to rank candidates by a header's unit)

    @classmethod
    def of(cls, catalog: Catalog, synonyms: dict[str, str] | None = None) -> NameIndex:
        """Names of every quantity (key, label, catalogue synonyms), and the user's own
        header *synonyms* (normalised name -> key), which take precedence over the others."""
        names: dict[str, dict[str, str]] = {}
        for name, key in (synonyms or {}).items():
            if key in catalog:
                names[name] = {key: "your synonym"}
        for key, q in catalog.items():
            for how, texts in (
                ("key", [key, key.replace("_", " ")]),
                ("label", [q.label]),
                ("synonym", list(q.synonyms)),
            ):
                for t in texts:
                    n = normalise(t)
                    if n and (n not in names or "your synonym" not in names[n].values()):
                        names.setdefault(n, {}).setdefault(key, how)
        return cls(names, {key: q.kind for key, q in catalog.items()})

    def exact(self, name: str) -> dict[str, str]:
        return self.names.get(name, {})

    def containing(self, name: str) -> list[str]:
        """Keys with a name holding every word of *name* (``length`` -> fiber_length,
        sarcomere_length). One-letter words are symbols, not words: ``f`` never finds a label
        ending in ``f``."""
        words = {w for w in name.split() if len(w) > 1}
        if not words:
            return []
        return sorted({k for n, ks in self.names.items() if words <= set(n.split()) for k in ks})

    def closest(self, name: str, limit: int = 3) -> list[str]:
        """Up to *limit* keys whose names are most like *name* (difflib ratio, plus 0.2 for a
        shared word; at least 0.45). The ratio's cheap upper bounds skip names that cannot
        reach 0.45, so a header with no near name costs little."""
        scores: dict[str, float] = {}
        words = {w for w in name.split() if len(w) > 1}  # a one-letter symbol is not a word
        for n, ks in self.names.items():
            bonus = 0.2 if words & set(n.split()) else 0.0
            sm = _matcher(n)
            sm.set_seq1(name)
            if sm.real_quick_ratio() + bonus < 0.45 or sm.quick_ratio() + bonus < 0.45:
                continue
            s = sm.ratio() + bonus
            for k in ks:
                scores[k] = max(scores.get(k, 0.0), s)
        best = sorted(scores, key=lambda k: (-scores[k], k))
        return [k for k in best if scores[k] >= 0.45][:limit]

    def ranked(self, keys: list[str], unit: str, limit: int = 5) -> list[str]:
        """*keys* ranked by words and by dimension together: keys whose kind the header's
        *unit* measures first (a frequency in Hz before a rate, a rate in 1/s before a
        frequency), the words' order kept within each rank; keys the unit cannot measure are
        dropped, and with none left, the quantities the unit measures are offered."""
        if not unit:
            return keys[:limit]
        fits = {k: unit_fit(unit, kind) for k, kind in self.kinds.items()}
        if not any(fits.values()):  # a unit of no catalogue kind (or unreadable): the words alone
            return keys[:limit]
        pool = [k for k in keys if fits.get(k, 0)] or [k for k in self.kinds if fits[k] == 2]
        return sorted(pool, key=lambda k: -fits.get(k, 0))[:limit]


def unit_fit(unit: str, kind: str) -> int:
    """How well a header's *unit* fits a quantity *kind*: 2 (it measures the kind, and a
    frequency is written in Hz, a rate not), 1 (same dimension only), 0 (not, or unreadable)."""
    from comparo.base import units

    try:
        if not units.measures(unit, kind):
            return 0
    except (units.UnitParseError, KeyError):
        return 0
    if kind in ("frequency", "rate"):
        return 2 if (kind == "frequency") == ("hz" in unit.casefold()) else 1
    return 2


@lru_cache(maxsize=4096)
def _matcher(n: str) -> difflib.SequenceMatcher:
    """A matcher with *n* as its second sequence (difflib caches its analysis of that one)."""
    return difflib.SequenceMatcher(None, "", n)


def _quantity(name: str, index: NameIndex, unit: str = "") -> tuple[str, str, str, tuple[str, ...]]:
    """(key, how, problem, candidates) for a trait name (normalised); candidates are ranked
    by the words and by the header's *unit* together (:meth:`NameIndex.ranked`)."""
    hit = index.exact(name)
    if len(hit) == 1:
        key, how = next(iter(hit.items()))
        return key, how, "", ()
    if len(hit) > 1:
        return (
            "",
            "",
            "ambiguous: the name belongs to more than one quantity",
            tuple(index.ranked(sorted(hit), unit)),
        )
    holders = index.containing(name)
    if len(holders) > 1:
        return (
            "",
            "",
            "ambiguous: the name is part of more than one quantity's name",
            tuple(index.ranked(holders, unit)),
        )
    cands = tuple(index.ranked(holders or index.closest(name), unit, limit=3))
    return "", "", "unknown: no quantity has this key, label or synonym", cands


def _split_suffix(name: str) -> tuple[str, str]:
    """(base, role) when *name* starts or ends with a spread / n / source / locator word."""
    for word, role in _SUFFIXES:
        if name.endswith(" " + word):
            return name[: -len(word) - 1].strip(), role
        if name.startswith(word + " "):
            return name[len(word) + 1 :].strip(), role
    return name, ""


def match_header(
    header: str, index: int, names: NameIndex, roles: dict[str, str] | None = None
) -> Column:
    """What the header at column *index* holds (see :class:`Column`); *roles* are the user's
    own header synonyms of long-format columns (normalised name -> role: taxon, source ...)."""
    col = Column(header, index)
    text, unit = split_unit(header)
    low_unit = normalise(unit)
    name = normalise(text)
    if low_unit in {w for w, _ in _SUFFIXES} and not name.endswith(
        " " + low_unit
    ):  # 'Body mass (SD)'
        name, unit = f"{name} {low_unit}", ""
    if roles and name in roles:
        return replace(col, role=roles[name], unit=unit, how="your synonym")
    if name in _ROLE_NAMES:
        role, key = _ROLE_NAMES[name]
        if role == "temperature":
            return replace(col, role=role, unit=unit or key, how="column name")
        return replace(col, role=role, key=key, unit=unit, how="column name")
    if name in GROUP_NAMES:
        return replace(col, role="taxa", key=name.replace(" ", "_"), how="grouping column")
    if text.strip().lower() in COPY_COLUMNS or text.strip().lower() == "uncertainty_kind":
        return replace(col, role="column", key=text.strip().lower(), how="column name")
    key, how, problem, cands = _quantity(name, names, unit)
    if key:
        return replace(col, role="value", key=key, unit=unit, how=how)
    base, role = _split_suffix(name)
    if role and base:
        bkey, bhow, bproblem, bcands = _quantity(base, names, unit)
        if bkey and role == "?spread":
            return replace(
                col,
                key=bkey,
                unit=unit,
                how=bhow,
                candidates=tuple(f"{r}:{bkey}" for r in UNCERTAINTY_ROLES[:2]),
                problem=(
                    f"the spread of {bkey}, but not which kind (write SD or SE in the header, or "
                    "set the role in the map file)"
                ),
            )
        if bkey:
            return replace(col, role=role, key=bkey, unit=unit, how=f"{bhow} + {role}")
        if bproblem.startswith("ambiguous"):
            return replace(col, unit=unit, problem=bproblem, candidates=bcands)
    if not cands and unit and unit_fit(unit, "temperature"):
        problem += (
            "; its unit is a temperature: set role 'temperature' if it is the measurement "
            "temperature"
        )
    return replace(col, unit=unit, problem=problem, candidates=cands)


SYNONYM_ROLES = ("taxon", "source", "locator", "temperature", "n")


def match_headers(
    header: list[str], catalog: Catalog, synonyms: dict[str, str] | None = None
) -> list[Column]:
    """:func:`match_header` for every non-empty header. *synonyms*: the user's own header
    names (name -> a catalogue key, or one of :data:`SYNONYM_ROLES`), as
    :func:`read_synonyms` checks them; they take precedence over the catalogue's names."""
    own = {normalise(k): v for k, v in (synonyms or {}).items()}
    names = NameIndex.of(catalog, {k: v for k, v in own.items() if v in catalog})
    roles = {k: v for k, v in own.items() if v in SYNONYM_ROLES and v not in catalog}
    return [match_header(h, i, names, roles) for i, h in enumerate(header) if h]


def read_synonyms(
    table: Any, catalog: Catalog, file: str, where: str = "header_synonyms"
) -> tuple[dict[str, str], list[Problem]]:
    """The user's header synonyms (``[header_synonyms]`` of comparo.toml:
    ``f = "frequency_observed"``, ``T = "temperature"``, ``k_on = "attach_rate"``), checked:
    each name maps to a catalogue key or to one of :data:`SYNONYM_ROLES`; a name that
    normalises to nothing, or to the same text as another name with another target, is an
    error."""
    if table is None:
        return {}, []
    if not isinstance(table, dict):
        return {}, [
            problem(
                file,
                "header-synonym",
                f'{where} must be a table of name = "key" pairs',
                column=where,
            )
        ]
    out: dict[str, str] = {}
    probs: list[Problem] = []
    seen: dict[str, str] = {}
    for name, target in table.items():
        n = normalise(name)
        if not isinstance(target, str) or (target not in catalog and target not in SYNONYM_ROLES):
            close = difflib.get_close_matches(str(target), [*catalog, *SYNONYM_ROLES], n=3)
            probs.append(
                problem(
                    file,
                    "header-synonym",
                    f"header synonym {name!r} points to {target!r}, which is neither a catalogue "
                    f"quantity nor one of {', '.join(SYNONYM_ROLES)}",
                    f"closest: {', '.join(close)}" if close else "run 'comparo units' for the keys",
                    column=where,
                    value=str(target),
                )
            )
            continue
        if not n:
            probs.append(
                problem(
                    file,
                    "header-synonym",
                    f"header synonym {name!r} has no letters or digits to match",
                    column=where,
                    value=name,
                )
            )
            continue
        if n in seen and out[seen[n]] != target:
            probs.append(
                problem(
                    file,
                    "header-synonym",
                    f"header synonyms {seen[n]!r} and {name!r} read as the same name but point to "
                    f"{out[seen[n]]!r} and {target!r}",
                    "keep one",
                    column=where,
                    value=name,
                )
            )
            continue
        seen.setdefault(n, name)
        out[name] = target
    return out, probs


# --------------------------------------------------------------------------- map files


def read_map(path: Path) -> tuple[dict[str, dict[str, str]], list[Problem]]:
    """A map file: CSV with columns header, role, key, unit, basis (candidates ignored),
    or the ``import.toml`` of an earlier import ([[columns]] tables with the same fields).
    Returns header -> fields."""
    import tomllib

    file = path.name
    if not path.is_file():
        return {}, [
            problem(str(path), "missing-file", "the map file does not exist or is not a file")
        ]
    text, probs = decode_bytes(path.read_bytes(), file)
    if text is None:
        return {}, probs
    entries: list[tuple[int, dict[str, str]]] = []
    if path.suffix.lower() == ".toml":
        try:
            doc = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            return {}, probs + [problem(file, "toml-syntax", f"cannot parse the map: {exc}")]
        except RecursionError:
            return {}, probs + [too_deep(file)]
        if nesting(doc) > MAX_SETTINGS_DEPTH:
            return {}, probs + [too_deep(file)]
        cols = doc.get("columns", [])
        if not isinstance(cols, list) or not all(isinstance(c, dict) for c in cols):
            return {}, probs + [
                problem(
                    file,
                    "map-format",
                    "import.toml needs [[columns]] tables (header, role, key, unit, basis)",
                )
            ]
        entries = [(i + 1, {k: nfc(str(v)) for k, v in c.items()}) for i, c in enumerate(cols)]
    else:
        reader = csv.DictReader(_io.StringIO(text.lstrip("\ufeff")))
        fields = [f.strip().lower() for f in (reader.fieldnames or [])]
        if "header" not in fields or "role" not in fields:
            return {}, probs + [
                problem(
                    file,
                    "map-format",
                    "the map file needs the columns header and role (also key, unit, basis)",
                    f"columns found: {', '.join(fields) or 'none'}",
                    row=1,
                )
            ]
        reader.fieldnames = fields
        entries = [
            (i + 2, {k: nfc((v or "").strip()) for k, v in rec.items() if k})
            for i, rec in enumerate(reader)
        ]
    out: dict[str, dict[str, str]] = {}
    for row, rec in entries:
        h = rec.get("header", "").strip()
        if not h:
            probs.append(problem(file, "map-header", "a map row has no header", row=row))
            continue
        if h in out:
            probs.append(
                problem(
                    file,
                    "map-duplicate",
                    f"header {h!r} is mapped twice",
                    row=row,
                    column="header",
                    value=h,
                )
            )
            continue
        rec["_row"] = str(row)
        out[h] = rec
    return out, probs


def apply_map(
    columns: list[Column], mapping: dict[str, dict[str, str]], catalog: Catalog, map_file: str
) -> tuple[list[Column], list[Problem]]:
    """Columns with the map file's decisions in place of the automatic ones."""
    probs: list[Problem] = []
    present = {c.header for c in columns}
    for h, rec in mapping.items():
        if h not in present:
            probs.append(
                problem(
                    map_file,
                    "map-header",
                    f"header {h!r} is not a column of the wide table",
                    "check the spelling (headers are matched exactly)",
                    row=int(rec["_row"]),
                    column="header",
                    value=h,
                )
            )
    out = []
    for c in columns:
        rec = mapping.get(c.header)
        if rec is None:
            out.append(c)
            continue
        role = rec.get("role", "").strip().lower()
        key = rec.get("key", "").strip()
        row = int(rec["_row"])
        new = replace(
            c,
            role=role,
            key=key,
            unit=rec.get("unit", "").strip() or c.unit,
            basis=rec.get("basis", "").strip().lower(),
            how="map file",
            problem="",
            candidates=(),
        )
        if role not in ROLES:
            probs.append(
                problem(
                    map_file,
                    "map-role",
                    f"role {role!r} of header {c.header!r} is not one of {', '.join(ROLES)}",
                    row=row,
                    column="role",
                    value=role,
                )
            )
            new = replace(new, role="")
        elif role in ("value", *UNCERTAINTY_ROLES) and key not in catalog:
            close = difflib.get_close_matches(key, list(catalog), n=3)
            probs.append(
                problem(
                    map_file,
                    "map-key",
                    f"key {key!r} of header {c.header!r} is not a catalogue quantity",
                    f"closest: {', '.join(close)}" if close else "run 'comparo units' for the keys",
                    row=row,
                    column="key",
                    value=key,
                )
            )
            new = replace(new, role="")
        elif role == "column" and key not in (*COPY_COLUMNS, "uncertainty_kind"):
            probs.append(
                problem(
                    map_file,
                    "map-key",
                    f"role 'column' copies into one of {', '.join(COPY_COLUMNS)}, "
                    f"uncertainty_kind; got {key!r}",
                    row=row,
                    column="key",
                    value=key,
                )
            )
            new = replace(new, role="")
        elif role == "taxa" and not key:
            new = replace(new, key=normalise(split_unit(c.header)[0]).replace(" ", "_"))
        if new.basis and new.basis not in BASES:
            probs.append(
                problem(
                    map_file,
                    "map-basis",
                    f"basis {new.basis!r} is not one of {', '.join(BASES)}",
                    row=row,
                    column="basis",
                    value=new.basis,
                )
            )
        out.append(new)
    return out, probs


def map_text(columns: list[Column]) -> str:
    """A ready-to-edit map file (CSV) for *columns*; unresolved rows have an empty role and
    their closest candidates in the last column."""
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(MAP_COLUMNS)
    for c in columns:
        w.writerow([c.header, c.role, c.key, c.unit, c.basis, "; ".join(c.candidates)])
    return buf.getvalue()
