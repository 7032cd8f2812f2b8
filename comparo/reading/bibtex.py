"""Sources in BibTeX (``sources.bib``) read into a sources table."""

from __future__ import annotations

import logging
import re
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.tables import RawTable
from comparo.reading.text import decode_bytes, exception_reason, nfc_cells

# --------------------------------------------------------------------------- sources


def read_bibtex(path: Path) -> tuple[RawTable | None, list[Problem]]:
    """Read ``sources.bib`` into a sources table (entry keys are source_ids)."""
    import bibtexparser
    import pandas as pd

    file = path.name
    data = path.read_bytes()
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, probs
    if not text.strip():
        return None, probs + [problem(file, "empty-file", "BibTeX file is empty")]
    logging.getLogger("bibtexparser").setLevel(logging.CRITICAL)  # its problems become ours
    try:
        lib = bibtexparser.parse_string(text)
    except Exception as exc:
        return None, probs + [
            problem(file, "bibtex-syntax", f"cannot parse BibTeX ({exception_reason(exc)})")
        ]
    for block in lib.failed_blocks:
        lines = [ln for ln in str(getattr(block, "error", "") or "").splitlines() if ln.strip()]
        reason = lines[-1].strip()[:200] if lines else "syntax error"
        probs.append(
            problem(
                file,
                "bibtex-syntax",
                f"BibTeX entry cannot be read: {reason}",
                "check braces and commas of this entry",
                row=(block.start_line or 0) + 1,
                value=block.raw[:60],
            )
        )
    recs, rows = [], []
    for entry in lib.entries:
        f = {k.lower(): _strip_braces(fld.value) for k, fld in entry.fields_dict.items()}
        recs.append(
            {
                "source_id": entry.key,
                "citation": bibtex_citation(f),
                "year": f.get("year", ""),
                "doi": f.get("doi", ""),
                "url": f.get("url", ""),
                "notes": f.get("note", ""),
            }
        )
        rows.append((entry.start_line or 0) + 1)
    if not recs:
        return None, probs or [problem(file, "empty-file", "BibTeX file holds no entries")]
    frame = pd.DataFrame(
        recs, columns=["source_id", "citation", "year", "doi", "url", "notes"]
    ).astype(str)
    return RawTable(file, frame, rows, nfc_cells(frame, rows)), probs


def _sentence(text: str) -> str:
    """*text* ending in exactly one full stop (or its own '?' or '!')."""
    t = text.strip().rstrip(".").rstrip()
    return "" if not t else t if t[-1] in "?!" else t + "."


def _authors(text: str) -> str:
    """BibTeX's 'A and B and C' as 'A, B and C'."""
    names = [n.strip() for n in re.split(r"\s+and\s+", text.strip()) if n.strip()]
    return (
        names[0]
        if len(names) == 1
        else ", ".join(names[:-1]) + " and " + names[-1]
        if names
        else ""
    )


def bibtex_citation(f: dict[str, str]) -> str:
    """A citation that reads like one, from the fields of a BibTeX entry (lower-case keys):
    ``Authors (year). Title. Journal volume(issue): pages.`` Each part ends in one full
    stop; missing parts are left out; page ranges get an en dash."""
    head = _authors(f.get("author", "") or f.get("editor", ""))
    year = f.get("year", "")
    if year:
        head = f"{head} ({year})" if head else f"({year})"
    venue = f.get("journal", "")
    if not venue and f.get("booktitle"):
        venue = "In " + f["booktitle"]
    volume, number = f.get("volume", ""), f.get("number", "") or f.get("issue", "")
    pages = re.sub(r"\s*-{1,3}\s*", "\u2013", f.get("pages", ""))
    where = venue
    if volume:
        where += f" {volume}" if where else f"Vol. {volume}"
    if number:
        where += f"({number})"
    if pages:
        where += f": {pages}" if where else f"pp. {pages}"
    publisher = f.get("publisher", "") if not f.get("journal") else ""
    parts = [
        _sentence(p)
        for p in (head, f.get("title", ""), where.strip(), publisher)
        if p and p.strip()
    ]
    return " ".join(p for p in parts if p)


def _strip_braces(v: Any) -> str:
    return re.sub(r"\s+", " ", str(v).replace("{", "").replace("}", "")).strip()
