"""The rules of the sources table: DOIs and the stub citations comparo import writes."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from comparo.base.errors import Problem
from comparo.reading.tables import RawTable
from comparo.validation.numbers import map_distinct

_DOI = re.compile(r"^10\.\d{4,9}/\S+$")

_DOI_PREFIX = re.compile(r"^\s*(?:(?:https?://)?(?:dx\.)?doi\.org/|doi:\s*)", re.I)


def normalise_doi(text: str) -> str:
    """A DOI as the bare name ``10.xxxx/...``: a ``https://doi.org/`` (or ``dx.doi.org``)
    URL and a ``doi:`` prefix are removed, once; anything else is kept as typed."""
    t = (text or "").strip()
    return _DOI_PREFIX.sub("", t, count=1).strip()


def normalise_dois(s: pd.Series) -> pd.Series:
    """:func:`normalise_doi` over a column of DOIs."""
    return map_distinct(s.fillna("").astype(str), normalise_doi)


STUB_CITATION_PREFIX = "NEEDS CITATION"  # how comparo import marks the stub sources it writes


def source_problems(raw: RawTable) -> list[Problem]:
    probs: list[Problem] = []
    if "citation" in raw.frame:
        stub = raw.frame["citation"].str.startswith(STUB_CITATION_PREFIX).to_numpy(dtype=bool)
        for i in np.flatnonzero(stub):
            probs.append(
                Problem(
                    "warning",
                    raw.file,
                    raw.rows[i],
                    "citation",
                    raw.frame["source_id"].iat[i] if "source_id" in raw.frame else "",
                    "citation-stub",
                    "the citation is a stub written by comparo import",
                    "replace it with the full citation of the source",
                )
            )
    if "doi" not in raw.frame:
        return probs
    doi = normalise_dois(raw.frame["doi"])
    bad = (doi != "") & ~doi.str.match(_DOI)
    for i in np.flatnonzero(bad.to_numpy()):
        probs.append(
            Problem(
                "warning",
                raw.file,
                raw.rows[i],
                "doi",
                raw.frame["doi"].iat[i],
                "doi-format",
                f"{doi.iat[i]!r} does not look like a DOI (10.xxxx/...)",
                "a DOI starts with 10., a registrant code of 4-9 digits and '/' (a "
                "https://doi.org/ or doi: prefix is fine)",
            )
        )
    return probs
