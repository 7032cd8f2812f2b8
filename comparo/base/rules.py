"""The one registry of problem rules: every rule id a :class:`~comparo.base.errors.Problem`
may carry, with its usual severity and a one-line meaning.

A rule id names one condition, whichever reader or check finds it: the same fault in a
dataset folder, a dataset workbook, a wide table read by ``comparo import`` or a tree
file gives the same id. ``docs/cli.md`` lists how problems are shown; the ids are part
of the output (the ``rule`` column and JSON key).

The columns of ``schema/tables.toml`` add one family of ids, ``<column>-<check>``
(``value-number``, ``n-integer``, ``basis-enum`` ...): :data:`COLUMN_CHECKS` lists the
checks.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

ERROR, WARNING, NOTE = "error", "warning", "note"


@dataclass(frozen=True)
class Rule:
    """One rule: its id, the severity of its problems (``error`` stops the analysis,
    ``warning`` does not, ``note`` is information) and what it means, in one line."""

    id: str
    severity: str
    meaning: str


_TABLE = (
    (
        "analysis-setting",
        ERROR,
        "an [[analysis]] entry of comparo.toml holds an unknown key or value",
    ),
    ("basis-assumed", NOTE, "a value used in the analysis is assumed, not measured"),
    ("basis-computed", NOTE, "a value used in the analysis is computed from other values"),
    ("basis-digitized", NOTE, "a value used in the analysis is digitized from a figure"),
    ("basis-proxy", NOTE, "a value used in the analysis stands in from another taxon"),
    ("bibtex-syntax", ERROR, "a BibTeX file or entry cannot be parsed"),
    ("cell-length", ERROR, "a cell is longer than the limit of characters (read cut to it)"),
    ("cell-without-header", ERROR, "a cell of a wide table lies beyond the last header"),
    ("citation-stub", WARNING, "a source's citation is still the stub comparo import wrote"),
    ("column-name", WARNING, "a column holds data but has no header"),
    ("column-reserved", ERROR, "a column name is one comparo uses for a column of its own"),
    (
        "column-unit",
        WARNING,
        "many values of a wide column leave the quantity's plausible range (a unit slip in the "
        "header?)",
    ),
    (
        "comparison-setting",
        ERROR,
        "a [[comparison]] entry of comparo.toml holds an unknown key or value",
    ),
    (
        "impute-settings",
        ERROR,
        "the [impute] table of comparo.toml holds an unknown key or value",
    ),
    ("computed-inputs", ERROR, "a computed value does not list the rows it was computed from"),
    (
        "conflict",
        WARNING,
        "two values of one quantity and taxon disagree by more than the conflict factor",
    ),
    ("control-character", ERROR, "a cell holds an invisible control character"),
    ("csv-syntax", ERROR, "a text table cannot be parsed as CSV/TSV"),
    ("delimiter", ERROR, "a text table is semicolon-delimited (a decimal-comma locale export)"),
    ("derive-setting", ERROR, "a [derive] setting of comparo.toml is unknown or out of range"),
    ("doi-format", WARNING, "a DOI does not have the form 10.xxxx/..."),
    ("duplicate-column", ERROR, "a column name appears twice in a table's header"),
    (
        "duplicate-row",
        WARNING,
        "two rows give the same value of the same quantity, taxon and source",
    ),
    ("empty-file", ERROR, "a file, sheet or table holds nothing to read"),
    (
        "encoding",
        ERROR,
        "a text file is not UTF-8 (an error when undecodable, a warning when read as Windows-1252)",
    ),
    ("end-of-file-marker", WARNING, "a text file ends with a Ctrl-Z end-of-file marker (ignored)"),
    ("field-count", ERROR, "a row of a text table has more fields than the header"),
    ("file-format", ERROR, "a file is not of the format its name says"),
    ("file-read", ERROR, "a file exists but cannot be read"),
    ("formula-no-value", ERROR, "a workbook cell holds a formula without a saved result"),
    ("header-ambiguous", ERROR, "a wide table's header matches more than one catalogue quantity"),
    (
        "header-line-break",
        ERROR,
        "a header row holds an unclosed quote (a line break inside a column name)",
    ),
    ("header-row", ERROR, "the header row given with --header-row is blank or beyond the table"),
    (
        "header-synonym",
        ERROR,
        "a [header_synonyms] entry points to no quantity or role, or clashes",
    ),
    ("header-unit", ERROR, "a wide table's header of a quantity gives no unit"),
    (
        "header-unit-kind",
        ERROR,
        "the unit in a wide table's header does not measure the quantity's kind",
    ),
    ("header-unknown", ERROR, "a wide table's header matches no catalogue quantity or column role"),
    ("inputs-self", ERROR, "a computed row lists itself among its inputs"),
    ("inputs-unknown", ERROR, "a computed row lists inputs that are not obs_ids of the table"),
    (
        "invisible-character",
        WARNING,
        "a name holds characters that show as nothing or as a plain space (read away)",
    ),
    ("locator-not-stated", WARNING, "imported values without a locator, written as 'not stated'"),
    ("map-basis", ERROR, "a map file gives a basis comparo does not know"),
    ("map-duplicate", ERROR, "a map file maps one header twice"),
    ("map-file-written", NOTE, "comparo import wrote a map file to be completed"),
    ("map-format", ERROR, "a map file is not a table of [[columns]]"),
    ("map-header", ERROR, "a map file row has no header or names a header the table lacks"),
    ("map-key", ERROR, "a map file gives a key that is not a catalogue quantity"),
    ("map-role", ERROR, "a map file gives a role comparo does not know"),
    ("missing-column", ERROR, "a required column is missing"),
    ("missing-file", ERROR, "a required file does not exist"),
    ("missing-folder", ERROR, "the dataset folder does not exist"),
    ("missing-sheet", ERROR, "a workbook lacks the sheet asked for"),
    ("missing-word", WARNING, "cells saying the value is missing (NA, n.d., -) make no row"),
    ("newick-depth", ERROR, "a Newick tree is nested too deeply to parse"),
    ("newick-syntax", ERROR, "a Newick text cannot be parsed (unbalanced parentheses, bad token)"),
    ("no-source-column", ERROR, "a wide table gives no source for a quantity's values"),
    ("no-taxon-column", ERROR, "a wide table has no column of taxon names"),
    ("no-trait-column", ERROR, "a wide table has no column of a catalogue quantity"),
    ("no-values", ERROR, "a wide table holds no value in its trait columns"),
    ("non-finite", ERROR, "a workbook number cell holds infinity or NaN"),
    ("not-a-file", ERROR, "a path names a folder, pipe, device or broken link instead of a file"),
    ("not-a-folder", ERROR, "a dataset path names a file that is not a dataset workbook"),
    ("not-a-number", ERROR, "a wide table's value cell is not a number"),
    ("out-of-range", WARNING, "a value lies outside the quantity's plausible range"),
    ("positive", ERROR, "a cell of a column declared positive is zero or negative"),
    ("nonnegative", ERROR, "a cell of a column declared non-negative is negative"),
    ("phylo-outlier", WARNING, "a value is far from what its relatives on the tree predict"),
    ("proxy-taxon", ERROR, "a proxy value does not name the taxon standing in"),
    ("q10-unused", WARNING, "a Q10 is given for a quantity that is not temperature-sensitive"),
    ("quantity-alias", ERROR, "a user quantity converts to an unknown quantity"),
    ("quantity-entry", ERROR, "a user quantity of comparo.toml is not a table of fields"),
    ("quantity-field", ERROR, "a user quantity of comparo.toml has an unknown field"),
    ("quantity-kind", ERROR, "a user quantity of comparo.toml has an unknown kind"),
    ("quantity-range", ERROR, "a user quantity's plausible range is not [low, high]"),
    ("quantity-synonyms", ERROR, "a user quantity's synonyms are not a list of names"),
    ("quantity-twice", ERROR, "two wide columns hold the same quantity"),
    ("quantity-unit", ERROR, "a user quantity has no canonical unit or one pint cannot read"),
    ("quantity-unit-kind", ERROR, "a user quantity's unit does not measure its kind"),
    ("quantity-unknown", ERROR, "a quantity key is not in the catalogue"),
    ("ratio-expression", ERROR, "a ratio of comparo.toml cannot be read or evaluated"),
    ("ratio-overflow", ERROR, "a ratio's powers leave the range of a double"),
    ("required-cell", ERROR, "a required cell is empty"),
    (
        "role-twice",
        ERROR,
        "two wide columns hold the same role (taxon, source, locator, temperature, n, spread)",
    ),
    ("se-negative", ERROR, "a derived value has a negative standard uncertainty"),
    ("settings-key", WARNING, "comparo.toml holds an unknown setting (ignored)"),
    (
        "settings-temperature",
        ERROR,
        "a [temperature] setting of comparo.toml is unknown or out of range",
    ),
    ("settings-type", ERROR, "a comparo.toml section has the wrong type"),
    ("settings-value", ERROR, "a comparo.toml setting has a value out of its range"),
    ("sheet-option", ERROR, "--sheet is given for a text table"),
    ("source-missing", ERROR, "a wide table's value has no source id"),
    ("source-unknown", ERROR, "a row's source_id is not in the sources table"),
    (
        "spread-twice",
        ERROR,
        "a value cell gives a spread after ± and a spread column gives one too",
    ),
    ("synonym", NOTE, "a reported taxon name is mapped to its accepted name"),
    ("synonym-chain", WARNING, "accepted names chain over several synonyms"),
    ("synonym-cycle", ERROR, "accepted names form a cycle"),
    ("table-kept", WARNING, "a table comparo import did not write is kept in the output folder"),
    ("taxa-conflict", ERROR, "a wide table gives two values of one per-taxon column for a taxon"),
    ("taxon-binomial", WARNING, "a taxon name is not a binomial 'Genus species'"),
    ("taxon-duplicate", ERROR, "a taxon occurs twice in the taxa table"),
    ("taxon-missing", ERROR, "a wide table's value has no taxon name"),
    ("taxon-without-tip", WARNING, "a taxon has no tip in the tree"),
    (
        "temperature-factor-range",
        ERROR,
        "a temperature correction factor leaves the range comparo accepts",
    ),
    (
        "temperature-fallback",
        NOTE,
        "a taxon without an operating temperature is brought to the fallback temperature",
    ),
    ("temperature-heterotherm", NOTE, "a heterotherm's value is normalised like an ectotherm's"),
    ("temperature-impossible", ERROR, "a temperature below absolute zero or above 1000 °C"),
    (
        "temperature-missing",
        WARNING,
        "a temperature-sensitive value has no measurement temperature",
    ),
    ("temperature-mixed", NOTE, "a per-taxon value combines values at different temperatures"),
    ("temperature-range", WARNING, "a temperature outside -5 to 60 °C for muscle"),
    ("title-row", ERROR, "the first row of a wide table looks like a title, not the headers"),
    ("toml-depth", ERROR, "a TOML file is nested too deeply"),
    ("toml-syntax", ERROR, "a TOML file cannot be parsed"),
    ("too-many-columns", ERROR, "a table has more columns than a spreadsheet's limit"),
    ("trace-column", ERROR, "a trace file lacks a column traces.csv names"),
    ("trace-cycles", ERROR, "a trace cannot be split into cycles"),
    ("trace-file-missing", ERROR, "a trace file traces.csv names does not exist"),
    ("trace-id-clash", ERROR, "observation ids look like the ids a trace's results get"),
    ("trace-number", ERROR, "a trace file cell is not a number"),
    ("trace-path", ERROR, "a trace path leaves the dataset folder or is not a file"),
    ("trace-result-range", ERROR, "a reduced trace result leaves the range comparo computes in"),
    ("trace-rows", NOTE, "rows computed from the traces join the observations"),
    ("trace-size", ERROR, "a trace file is bigger than comparo reads"),
    ("trace-source", ERROR, "a trace's source_id is not in the sources table"),
    ("trace-strain-large", WARNING, "strains look typed in percent with unit 1"),
    ("trace-strain-range", ERROR, "strains at or below -100%"),
    ("trace-time-order", ERROR, "a trace's time does not increase"),
    ("trace-unit", ERROR, "a trace unit cannot be read"),
    ("trace-unit-kind", ERROR, "a trace unit does not fit the column"),
    ("trace-value-range", ERROR, "trace samples beyond 1e100 in SI units"),
    (
        "tree-ambiguous-tip",
        ERROR,
        "two tips are the same name once underscores, spaces and case are folded",
    ),
    ("tree-branch-lengths", ERROR, "edges of a tree have no branch length"),
    ("tree-count", ERROR, "a Newick file holds more or fewer than one tree"),
    ("tree-duplicate-tip", ERROR, "a tip label occurs twice in a tree"),
    ("tree-tip-claimed", ERROR, "two taxa match one tip of the tree"),
    ("tree-tip-label", ERROR, "tips of a tree have no label"),
    ("tree-two-tips", ERROR, "one accepted taxon matches two tips of the tree"),
    (
        "tree-zero-contrast",
        ERROR,
        "two sister lineages of total length 0 (a contrast is undefined)",
    ),
    ("tree-zero-tip", ERROR, "tip edges of length 0 (the covariance cannot be inverted)"),
    (
        "uncertainty-kind",
        WARNING,
        "an uncertainty is given without its kind (read as a standard deviation)",
    ),
    ("uncertainty-missing", WARNING, "an uncertainty kind is given without an uncertainty"),
    ("unicode-unified", WARNING, "a name typed in two Unicode forms is read as one"),
    ("unique", ERROR, "a value that must be unique in its column repeats"),
    (
        "uncertainty-conversion-range",
        ERROR,
        "an uncertainty converted to the canonical unit leaves the working range",
    ),
    ("unit-dimension", ERROR, "a unit does not measure the quantity's kind"),
    ("unit-slip", WARNING, "a value is a power of ten off its group (a unit slip?)"),
    ("unit-unknown", ERROR, "a unit pint cannot read"),
    (
        "unpaired-column",
        ERROR,
        "a spread, n, source or locator column belongs to no single value column",
    ),
    ("value-positive", ERROR, "a value that must be positive is zero or negative"),
    (
        "value-conversion-range",
        ERROR,
        "a value converted to the canonical unit leaves the working range",
    ),
    ("xlsx-read", ERROR, "a workbook or sheet cannot be read"),
    ("xlsx-size", ERROR, "a workbook sheet is bigger than comparo reads"),
)

#: Every rule by id (read-only).
RULES: MappingProxyType[str, Rule] = MappingProxyType({r[0]: Rule(*r) for r in _TABLE})

#: The per-column checks of ``schema/tables.toml``; a problem of one has the id
#: ``<column>-<check>`` (``value-number``) and is an error.
COLUMN_CHECKS: MappingProxyType[str, str] = MappingProxyType(
    {
        "number": "a cell of the column is not a number",
        "integer": "a cell of the column is not a whole number",
        "integer-range": "a whole number of the column is too large to hold exactly",
        "enum": "a cell of the column is not one of its allowed values",
        "maximum": "a cell of the column is larger than its largest plausible value",
    }
)


def rule(rule_id: str) -> Rule:
    """The :class:`Rule` of *rule_id* (``<column>-<check>`` ids included); KeyError if none."""
    found = RULES.get(rule_id)
    if found is not None:
        return found
    for check, meaning in COLUMN_CHECKS.items():
        column = rule_id.removesuffix("-" + check)
        if column != rule_id and column:
            return Rule(rule_id, ERROR, f"{meaning} ({column})")
    raise KeyError(rule_id)


def is_registered(rule_id: str) -> bool:
    """Whether *rule_id* is in the registry (a plain id, or ``<column>-<check>``)."""
    try:
        rule(rule_id)
    except KeyError:
        return False
    return True
