"""The temperature policy: which values are brought to which temperature, with which Q10.

A part of validation (it imports only the foundations): :func:`temperature_policy`
reads the settings (``reference_temperature_c`` and the ``[temperature]`` table of
comparo.toml), :func:`temperature_settings_problems` checks them for ``comparo check``,
and :func:`fit_temperature` summarises, for a fit, what the harmonisation did to the
values behind it. The harmonisation itself is :func:`comparo.curation.harmonise.harmonise`; the
rules are written out in docs/methods/temperature.md.

Settings (all optional)::

    reference_temperature_c = 25.0          # a number (°C), or "operating"
    [temperature]
    fallback_c = 25.0                       # "operating": taxa without operating_temperature_c
    regulated_in_vivo = "as_measured"       # or "normalise"
    heterotherm_tolerance_c = 2.0           # heterotherm in vivo within this of its operating
                                            # temperature counts as regulated
    [[temperature.rule]]                    # Q10 rules, the last matching one wins
    q10 = 2.5
    quantity = ["attach_rate", "detach_rate"]   # optional: one key or a list (else every one)
    where = { clade = "Diptera" }           # optional: taxa.csv column = value or list of values
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

from comparo.base.errors import Problem

DEFAULT_REFERENCE_C = 25.0
DEFAULT_HETEROTHERM_TOLERANCE_C = 2.0
_TEMPERATURE_KEYS = {"fallback_c", "regulated_in_vivo", "heterotherm_tolerance_c", "rule"}
_RULE_KEYS = {"q10", "quantity", "where"}
TAXA_TEMPERATURE_COLUMNS = ("thermoregulation", "operating_temperature_c")

# rule names of a harmonised row (column ``temperature_rule``)
RULE_Q10, RULE_ARRHENIUS, RULE_KEPT, RULE_NONE = "Q10", "Arrhenius", "as measured", "none"


@dataclass(frozen=True)
class Q10Rule:
    """One ``[[temperature.rule]]``: a Q10 (dimensionless) for some quantities of some taxa.

    ``quantities`` empty: every temperature-sensitive quantity; ``where`` empty: every
    taxon; else a taxon matches when, for every taxa.csv column named, its value is one
    of those listed."""

    q10: float
    quantities: tuple[str, ...] = ()
    where: tuple[tuple[str, tuple[str, ...]], ...] = ()

    def matches(self, quantity: str, groups: dict[str, str]) -> bool:
        if self.quantities and quantity not in self.quantities:
            return False
        return all(groups.get(col, "") in values for col, values in self.where)


@dataclass(frozen=True)
class TemperaturePolicy:
    """The temperature settings of a dataset, read from comparo.toml.

    Attributes
    ----------
    operating : bool
        ``reference_temperature_c = "operating"``: each taxon's values are brought to
        its own ``operating_temperature_c`` (°C).
    reference_c : float
        The reference temperature in °C (with ``operating``, the fallback for taxa
        without an operating temperature). Default 25.
    regulated_in_vivo : str
        ``as_measured`` (default): an endotherm's in-vivo values, and a heterotherm's
        in-vivo values measured within ``heterotherm_tolerance_c`` of its operating
        temperature, are kept at the temperature they were measured at;
        ``normalise``: they are normalised like any other value.
    heterotherm_tolerance_c : float
        Kelvin (°C difference); default 2.
    rules : tuple of Q10Rule
    """

    operating: bool = False
    reference_c: float = DEFAULT_REFERENCE_C
    regulated_in_vivo: str = "as_measured"
    heterotherm_tolerance_c: float = DEFAULT_HETEROTHERM_TOLERANCE_C
    rules: tuple[Q10Rule, ...] = field(default=())

    @property
    def target_text(self) -> str:
        """``"25 °C"`` or ``"operating temperature"``: what values are brought to."""
        return "operating temperature" if self.operating else f"{self.reference_c:g} °C"

    def to_dict(self) -> dict:
        return {
            "reference_temperature_c": "operating" if self.operating else self.reference_c,
            "fallback_c": self.reference_c,
            "regulated_in_vivo": self.regulated_in_vivo,
            "heterotherm_tolerance_c": self.heterotherm_tolerance_c,
            "rules": [
                {
                    "q10": r.q10,
                    "quantity": list(r.quantities),
                    "where": {c: list(v) for c, v in r.where},
                }
                for r in self.rules
            ],
        }


def _number(v: Any) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def _as_list(v: Any) -> list:
    return list(v) if isinstance(v, list) else [v]


def temperature_policy(settings: dict[str, Any]) -> TemperaturePolicy:
    """The :class:`TemperaturePolicy` of parsed settings; entries of a wrong type are
    skipped here (``comparo check`` reports them: :func:`temperature_settings_problems`)."""
    table = settings.get("temperature")
    table = table if isinstance(table, dict) else {}
    ref = settings.get("reference_temperature_c")
    operating = ref == "operating"
    fallback = table.get("fallback_c")
    reference = (
        float(ref)
        if _number(ref)
        else float(fallback)
        if _number(fallback)
        else DEFAULT_REFERENCE_C
    )
    regulated = table.get("regulated_in_vivo")
    tol = table.get("heterotherm_tolerance_c")
    rules = []
    for r in _as_list(table.get("rule", [])):
        if not isinstance(r, dict) or not _number(r.get("q10")) or r["q10"] <= 0:
            continue
        qs = tuple(str(q) for q in _as_list(r.get("quantity", [])))
        where = r.get("where", {})
        where = (
            tuple((str(c), tuple(str(x) for x in _as_list(v))) for c, v in where.items())
            if isinstance(where, dict)
            else ()
        )
        rules.append(Q10Rule(float(r["q10"]), qs, where))
    return TemperaturePolicy(
        operating=operating,
        reference_c=reference,
        regulated_in_vivo=regulated if regulated in ("as_measured", "normalise") else "as_measured",
        heterotherm_tolerance_c=float(tol)
        if _number(tol) and tol >= 0
        else DEFAULT_HETEROTHERM_TOLERANCE_C,
        rules=tuple(rules),
    )


def temperature_settings_problems(
    settings: dict[str, Any], catalog: Any, taxa: Any = None
) -> list[Problem]:
    """Every problem of the ``[temperature]`` table of comparo.toml, in one pass.

    *catalog* maps quantity keys to catalogue entries; *taxa* is the taxa table's frame
    (``None`` when the dataset has none): a rule's ``where`` must name its columns and,
    as a warning, values that occur in them."""
    probs: list[Problem] = []

    def bad(key: str, value: Any, message: str, hint: str = "", severity: str = "error") -> None:
        probs.append(
            Problem(
                severity,
                "comparo.toml",
                None,
                key,
                str(value),
                "settings-temperature",
                message,
                hint,
            )
        )

    table = settings.get("temperature")
    if table is None:
        return probs
    if not isinstance(table, dict):
        bad(
            "temperature",
            table,
            "[temperature] must be a table",
            "for example [temperature] followed by fallback_c = 25.0",
        )
        return probs
    _entry_problems(settings, table, bad)
    rules = table.get("rule", [])
    if not isinstance(rules, list) or not all(isinstance(r, dict) for r in rules):
        bad(
            "temperature.rule",
            rules,
            "rules are written [[temperature.rule]], one table per rule",
            'for example [[temperature.rule]] followed by q10 = 2.5 and quantity = "attach_rate"',
        )
        return probs
    columns = set(taxa.columns) if taxa is not None else set()
    for i, r in enumerate(rules, start=1):
        _rule_problems(i, r, catalog, bad)
        _where_problems(i, r.get("where", {}), taxa, columns, bad)
    return probs


Report = Callable[..., None]  # bad(key, value, message, hint="", severity="error")


def _entry_problems(settings: dict[str, Any], table: dict, bad: Report) -> None:
    """The entries of ``[temperature]`` other than its rules."""
    for key in table:
        if key not in _TEMPERATURE_KEYS:
            close = difflib.get_close_matches(str(key), sorted(_TEMPERATURE_KEYS), n=1)
            bad(
                f"temperature.{key}",
                table[key],
                f"unknown entry {key!r} in [temperature]",
                f"did you mean {close[0]!r}?"
                if close
                else f"known entries: {', '.join(sorted(_TEMPERATURE_KEYS))}",
            )
    fb = table.get("fallback_c")
    if fb is not None and (not _number(fb) or not -5 <= fb <= 60):
        bad(
            "temperature.fallback_c",
            fb,
            "fallback_c must be a number of degrees Celsius between -5 and 60",
        )
    if fb is not None and _number(settings.get("reference_temperature_c")):
        bad(
            "temperature.fallback_c",
            fb,
            'fallback_c is used only with reference_temperature_c = "operating" (ignored)',
            'remove it, or set reference_temperature_c = "operating"',
            "warning",
        )
    reg = table.get("regulated_in_vivo")
    if reg is not None and reg not in ("as_measured", "normalise"):
        bad(
            "temperature.regulated_in_vivo",
            reg,
            'regulated_in_vivo must be "as_measured" or "normalise"',
        )
    tol = table.get("heterotherm_tolerance_c")
    if tol is not None and (not _number(tol) or not 0 <= tol <= 20):
        bad(
            "temperature.heterotherm_tolerance_c",
            tol,
            "heterotherm_tolerance_c must be a number of kelvin from 0 to 20",
        )


def _rule_problems(i: int, r: dict, catalog: Any, bad: Report) -> None:
    """One ``[[temperature.rule]]`` (number *i*): its keys, q10 and quantities."""
    where_key = f"temperature.rule[{i}]"
    if i > 1 and "quantity" not in r and "where" not in r:
        bad(
            where_key,
            "",
            f"rule {i} applies to every value, so the {i - 1} rule(s) before it never apply "
            "(the last matching rule wins)",
            "put the general rule first, the specific ones after it",
            "warning",
        )
    for key in r:
        if key not in _RULE_KEYS:
            bad(
                f"{where_key}.{key}",
                r[key],
                f"unknown entry {key!r} in rule {i}",
                "a rule has q10, quantity and where",
            )
    q = r.get("q10")
    if q is None:
        bad(f"{where_key}.q10", "", f"rule {i} has no q10", "give q10 = a number, e.g. 2.5")
    elif not _number(q) or not 0 < q <= 100:
        bad(
            f"{where_key}.q10",
            q,
            "q10 must be a number greater than 0 and at most 100",
            "typical biological Q10 is 2-3 (rule of thumb)",
        )
    for k in _as_list(r.get("quantity", [])):
        if not isinstance(k, str) or k not in catalog:
            close = difflib.get_close_matches(str(k), list(catalog), n=1)
            bad(
                f"{where_key}.quantity",
                k,
                f"rule {i} names unknown quantity {k!r}",
                f"did you mean {close[0]!r}?"
                if close
                else "use a catalogue key (comparo units lists them)",
            )
        elif not catalog[k].temperature_sensitive:
            bad(
                f"{where_key}.quantity",
                k,
                f"{k} is not temperature-sensitive; rule {i} does nothing for it",
                "",
                "warning",
            )


def _where_problems(i: int, where: Any, taxa: Any, columns: set[str], bad: Report) -> None:
    """The ``where`` table of rule *i*: columns of taxa.csv and values found in them."""
    where_key = f"temperature.rule[{i}]"
    if not isinstance(where, dict):
        bad(
            f"{where_key}.where",
            where,
            "where must be a table of taxa.csv column = value",
            'for example where = { clade = "Diptera" }',
        )
        return
    for col, vals in where.items():
        if not all(isinstance(v, str) for v in _as_list(vals)):
            bad(f"{where_key}.where.{col}", vals, "a where value must be text or a list of text")
        elif col not in columns:
            bad(
                f"{where_key}.where.{col}",
                col,
                f"rule {i} selects taxa by column {col!r}, which taxa.csv "
                + (
                    "does not have"
                    if taxa is not None
                    else "cannot give: the dataset has no taxa.csv"
                ),
                f"taxa.csv columns: {', '.join(sorted(columns))}"
                if columns
                else "add a taxa.csv with that column",
            )
        else:
            present = set(taxa[col].astype(str))
            for v in _as_list(vals):
                if v not in present:
                    close = difflib.get_close_matches(v, sorted(present), n=1)
                    bad(
                        f"{where_key}.where.{col}",
                        v,
                        f"no taxon has {col} = {v!r}; rule {i} matches no taxon for it",
                        f"did you mean {close[0]!r}?" if close else "",
                        "warning",
                    )


def fit_temperature(
    table: Any, quantities: Iterable[str], labels: Iterable[str], taxon_col: str = "taxon"
) -> dict | None:
    """What the temperature harmonisation did to the values behind a fit.

    *table* is a per-taxon table of :func:`comparo.curation.aggregation.per_taxon` (its
    ``attrs["temperature"]`` holds what happened to the values of each quantity and
    taxon); *quantities* are the fitted columns and *labels* the taxa fitted.

    Returns None for a table without those records (a plain CSV). Otherwise a dict:
    ``to`` (``"25 °C"``, ``"operating temperature"`` or ``"off"``); ``values``
    (temperature-sensitive values behind the fit); ``rescaled`` (values multiplied by a
    factor other than 1); ``factor_min`` and ``factor_max`` (over the rescaled values,
    dimensionless; null when none); ``kept_as_measured`` (regulated in-vivo values left
    at their measured temperature); ``without_temperature`` (values with no measurement
    temperature); ``fallback`` (with ``"operating"``: rescaled values of taxa without an
    operating temperature, brought to ``fallback_c`` °C instead); ``option``
    (``--no-temperature``, which turns the normalisation off).
    """
    info = getattr(table, "attrs", {}).get("temperature")
    if not info:
        return None
    wanted = set(labels)
    keys = set(quantities)
    recs = [r for r in info["values"] if r[0] in keys and r[1] in wanted]
    rescaled = sum(r[3] for r in recs)
    return {
        "to": info["to"],
        "values": sum(r[2] for r in recs),
        "rescaled": rescaled,
        "factor_min": min(r[4] for r in recs if r[3]) if rescaled else None,
        "factor_max": max(r[5] for r in recs if r[3]) if rescaled else None,
        "kept_as_measured": sum(r[6] for r in recs),
        "without_temperature": sum(r[7] for r in recs),
        "fallback": sum(r[8] for r in recs),
        "fallback_c": info.get("fallback_c"),
        "option": "--no-temperature",
    }


def fit_temperature_text(t: dict | None) -> str:
    """One line for a fit's summary from :func:`fit_temperature` (empty when ``None``)."""
    if not t or not t["values"]:
        return ""
    if t["to"] == "off":
        return (
            f"temperature: off (--no-temperature): {t['values']} temperature-sensitive "
            "value(s) used at their measured temperatures"
        )
    text = (
        f"temperature: {t['rescaled']} of {t['values']} temperature-sensitive value(s) "
        f"rescaled to {t['to']}"
    )
    if t["rescaled"]:
        lo, hi = f"{t['factor_min']:.3g}", f"{t['factor_max']:.3g}"
        text += f" (factor {lo}" + ("" if lo == hi else f" to {hi}")
        if t.get("fallback"):
            text += (
                f"; {t['fallback']} of them, of taxa without operating_temperature_c, to the "
                f"fallback {t['fallback_c']:g} °C"
            )
        text += ")"
    same = t["values"] - t["rescaled"] - t["kept_as_measured"] - t["without_temperature"]
    if same > 0:
        text += f"; {same} needed no rescaling (factor 1)"
    if t["kept_as_measured"]:
        text += f"; {t['kept_as_measured']} in-vivo value(s) of regulating taxa kept as measured"
    if t["without_temperature"]:
        text += f"; {t['without_temperature']} without a temperature, used as measured"
    return text + "; --no-temperature turns this off"
