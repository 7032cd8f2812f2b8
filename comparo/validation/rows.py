"""The rules that span the columns of the observations table: quantity names, signs,
sources, computed and proxy rows, temperature, uncertainty, plausible ranges and names;
each failure a :class:`~comparo.base.errors.Problem` at the row a spreadsheet shows."""

from __future__ import annotations

import difflib
import re

import numpy as np
import pandas as pd

from comparo.base.catalog import Catalog, read_schema
from comparo.base.errors import Problem, problem
from comparo.reading.tables import RawTable
from comparo.validation.numbers import map_distinct, parse_numbers

BASIS_ORDER = ["reported", "computed", "digitized", "proxy", "assumed"]
#: The basis of a per-taxon value predicted from relatives on the tree (``--impute``,
#: ``[impute]``), weaker than every basis above; never a basis of observations.csv.
IMPUTED_BASIS = "imputed"

_BINOMIAL = re.compile(r"^[A-Z][a-z]+(?:\s[a-z][a-z-]+){1,2}$")

# --------------------------------------------------------------------------- observations


def typed_observations(raw: RawTable) -> pd.DataFrame:
    spec = read_schema("tables.toml")["observations"]["columns"]
    obs = raw.frame.copy()
    for name, c in spec.items():
        if name not in obs.columns:
            obs[name] = ""
        if c.get("type") in ("number", "integer"):
            obs[name] = parse_numbers(obs[name])
    obs.insert(0, "row", np.asarray(raw.rows, dtype=int))
    return obs


class RowProblems:
    """The problems of one observations table, collected in one pass."""

    def __init__(self, file: str, obs: pd.DataFrame) -> None:
        self.file = file
        self.obs = obs
        self.rows = obs["row"].to_numpy()
        self.problems: list[Problem] = []

    def add(self, mask, severity, column, rule, message, hint="", values=None) -> None:
        """One problem per row where *mask* holds; *message* and *hint* may be functions of the row
        index."""
        obs, rows = self.obs, self.rows
        idx = np.flatnonzero(np.asarray(mask, dtype=bool))
        vals = obs[column].astype(str).to_numpy() if values is None and column in obs else values
        for i in idx:
            m = message(i) if callable(message) else message
            h = hint(i) if callable(hint) else hint
            self.problems.append(
                Problem(
                    severity,
                    self.file,
                    int(rows[i]),
                    column,
                    None if vals is None else str(vals[i]),
                    rule,
                    m,
                    h,
                )
            )


def _name(text: str) -> str:
    """A quantity name for comparison: case-folded, British 'fibre' as 'fiber', '_', '-' and spaces
    one space."""
    return " ".join(
        re.sub(r"[_\-\s]+", " ", str(text).casefold().replace("fibre", "fiber")).split()
    )


def check_quantity_names(
    c: RowProblems, qty: pd.Series, known: pd.Series, catalog: Catalog
) -> None:
    """Every quantity is a key of the catalogue (with the closest key as a hint)."""
    # quantity known?
    unknown = ~known & (qty != "")
    if unknown.any():
        keys = list(catalog)
        names = {_name(t): k for k, q in catalog.items() for t in (k, q.label, *q.synonyms)}

        def qhint(i):
            named = names.get(
                _name(qty.iat[i])
            )  # a label or synonym of a key ('wingbeat frequency')
            if named:
                return (
                    f"{qty.iat[i]!r} is a name of the quantity {named!r}: write its key {named!r} "
                    "(see 'comparo units')"
                )
            close = difflib.get_close_matches(qty.iat[i], keys, n=1)
            return (f"did you mean {close[0]!r}? " if close else "") + (
                "see 'comparo units' for the catalogue, or declare it in comparo.toml "
                "[quantities.KEY]"
            )

        c.add(
            unknown,
            "error",
            "quantity",
            "quantity-unknown",
            lambda i: f"unknown quantity {qty.iat[i]!r}",
            qhint,
        )


def check_sign(
    c: RowProblems, obs: pd.DataFrame, catalog: Catalog, qty: pd.Series, target_key: pd.Series
) -> None:
    """Physical magnitudes of the catalogue are positive (temperatures excepted)."""
    value = obs["value"].to_numpy(dtype=float)
    # sign: physical magnitudes in the catalogue are positive (temperatures excepted)
    positive_kind = map_distinct(
        target_key, lambda k: bool(k) and catalog[k].kind != "temperature"
    ).to_numpy(dtype=bool)
    nonpos = positive_kind & (value <= 0)
    c.add(
        nonpos,
        "error",
        "value",
        "value-positive",
        lambda i: f"{qty.iat[i]} must be greater than 0",
        "a zero or negative value is impossible for this quantity: check the sign and the unit",
        obs["value"].to_numpy(),
    )


def check_sources(c: RowProblems, obs: pd.DataFrame, source_ids: set[str]) -> None:
    """Every source_id is in the sources table."""
    # sources
    sid = obs["source_id"]
    missing_src = (sid != "") & ~sid.isin(list(source_ids))
    c.add(
        missing_src,
        "error",
        "source_id",
        "source-unknown",
        lambda i: f"source {sid.iat[i]!r} is not in the sources table",
        "add it to sources.csv / sources.bib or correct the id",
    )


def check_lineage_columns(c: RowProblems, obs: pd.DataFrame) -> None:
    """Computed rows name their inputs (existing obs_ids, not themselves); proxies name the proxy
    taxon."""
    # computed rows need their inputs; proxies need the proxy taxon
    b = obs["basis"]
    comp = (b == "computed").to_numpy()
    no_inputs = comp & (obs["inputs"] == "").to_numpy()
    c.add(
        no_inputs,
        "error",
        "inputs",
        "computed-inputs",
        "basis is 'computed' but inputs is empty",
        "list the obs_ids the value was computed from, ';'-separated",
    )
    ids = set(obs["obs_id"])
    has_inputs = (obs["inputs"] != "").to_numpy()
    for i in np.flatnonzero(has_inputs):
        refs = [r.strip() for r in obs["inputs"].iat[i].split(";") if r.strip()]
        missing = [r for r in refs if r not in ids]
        row, value = int(c.rows[i]), obs["inputs"].iat[i]
        if missing:
            c.problems.append(
                problem(
                    c.file,
                    "inputs-unknown",
                    f"inputs name obs_id(s) not in the table: {', '.join(missing)}",
                    "each input must be an obs_id of another row",
                    row=row,
                    column="inputs",
                    value=value,
                )
            )
        if obs["obs_id"].iat[i] in refs:
            c.problems.append(
                problem(
                    c.file,
                    "inputs-self",
                    "a row cannot be computed from itself",
                    row=row,
                    column="inputs",
                    value=value,
                )
            )
    no_proxy = (b == "proxy").to_numpy() & (obs["proxy_taxon"] == "").to_numpy()
    c.add(
        no_proxy,
        "error",
        "proxy_taxon",
        "proxy-taxon",
        "basis is 'proxy' but proxy_taxon is empty",
        "name the taxon whose value stands in",
    )


def check_temperature(
    c: RowProblems,
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    qty: pd.Series,
    target_key: pd.Series,
) -> None:
    """Temperature-sensitive values need a temperature; impossible and unusual temperatures; unused
    Q10."""
    # temperature-sensitive values need a temperature
    ts = map_distinct(target_key, lambda k: bool(k) and catalog[k].temperature_sensitive).to_numpy(
        dtype=bool
    )
    temp = obs["temperature_c"].to_numpy(dtype=float)
    raw_temp = (
        raw.frame["temperature_c"] if "temperature_c" in raw.frame else pd.Series([""] * len(obs))
    )
    no_temp = ts & (raw_temp.to_numpy() == "")
    c.add(
        no_temp,
        "warning",
        "temperature_c",
        "temperature-missing",
        lambda i: f"{qty.iat[i]} is temperature-sensitive but has no temperature_c",
        "give the measurement temperature; otherwise the value is used un-normalised",
        raw_temp.to_numpy(),
    )
    impossible = ~np.isnan(temp) & ((temp < -273.15) | (temp > 1000))
    c.add(
        impossible,
        "error",
        "temperature_c",
        "temperature-impossible",
        "temperature below absolute zero (-273.15 °C) or above 1000 °C",
        "temperature_c is in degrees Celsius",
        obs["temperature_c"].to_numpy(),
    )
    odd_temp = ~np.isnan(temp) & ~impossible & ((temp < -5) | (temp > 60))
    c.add(
        odd_temp,
        "warning",
        "temperature_c",
        "temperature-range",
        "temperature outside -5 to 60 °C for muscle",
        "temperature_c is in degrees Celsius (a Fahrenheit or kelvin value?)",
        obs["temperature_c"].to_numpy(),
    )
    q10_set = ~np.isnan(obs["q10"].to_numpy(dtype=float)) & ~ts & (target_key != "").to_numpy()
    c.add(
        q10_set,
        "warning",
        "q10",
        "q10-unused",
        lambda i: f"a Q10 is given but {qty.iat[i]} is not temperature-sensitive (ignored)",
    )


def check_uncertainty(c: RowProblems, raw: RawTable, obs: pd.DataFrame) -> None:
    """An uncertainty and its kind go together."""
    # uncertainty and its kind go together
    unc = obs["uncertainty"].to_numpy(dtype=float)
    kind = obs["uncertainty_kind"]
    c.add(
        ~np.isnan(unc) & (kind == "").to_numpy(),
        "warning",
        "uncertainty_kind",
        "uncertainty-kind",
        "uncertainty given without uncertainty_kind: treated as a standard deviation",
        "give sd, se, ci95 or range_half",
        obs["uncertainty"].to_numpy(),
    )
    c.add(
        np.isnan(unc)
        & (kind != "").to_numpy()
        & (raw.frame.get("uncertainty", pd.Series([""] * len(obs))) == "").to_numpy(),
        "warning",
        "uncertainty",
        "uncertainty-missing",
        "uncertainty_kind given without an uncertainty value",
    )


def check_plausible_range(
    c: RowProblems, obs: pd.DataFrame, catalog: Catalog, target_key: pd.Series
) -> None:
    """Values outside the catalogue's plausible range (canonical units) are warned of."""
    from comparo.base import units

    # plausible range (in canonical units)
    lo = map_distinct(
        target_key, lambda k: catalog[k].range[0] if k and catalog[k].range else np.nan
    ).to_numpy(dtype=float)
    hi = map_distinct(
        target_key, lambda k: catalog[k].range[1] if k and catalog[k].range else np.nan
    ).to_numpy(dtype=float)
    vc = obs["value_canonical"].to_numpy(dtype=float)
    out = ~np.isnan(vc) & ((vc < lo) | (vc > hi))

    def range_msg(i):
        q = catalog[target_key.iat[i]]
        return (
            f"{vc[i]:.4g} {units.pretty(q.unit)} is outside the plausible range "
            f"{q.range[0]:g}-{q.range[1]:g} {units.pretty(q.unit)} for {q.key} ({q.range_source})"
        )

    c.add(
        out,
        "warning",
        "value",
        "out-of-range",
        range_msg,
        "check the value and its unit (a slip by a factor of 1000?)",
        obs["value"].to_numpy(),
    )


def check_names(c: RowProblems, obs: pd.DataFrame) -> None:
    """Taxon names are expected as binomials (Genus species)."""
    # names: a binomial (Genus species) is expected
    tax = obs["taxon"]
    first = ~tax.duplicated() & (tax != "")
    nonbin = first & ~tax.str.match(_BINOMIAL)
    counts = tax.value_counts()
    c.add(
        nonbin,
        "warning",
        "taxon",
        "taxon-binomial",
        lambda i: f"taxon name is not a binomial 'Genus species' ({counts[tax.iat[i]]} row(s))",
        "use the scientific name; map reported names to accepted ones in taxa.csv",
    )
