"""A dataset folder, read and validated: :func:`load` and the :class:`Dataset` it returns.

The room above reading (:mod:`comparo.reading.tables`, which returns raw tables of text)
and validation (:mod:`comparo.validation.tables`, which imports reading and builds the
:class:`Dataset`); neither of them imports this module. The check of a folder,
``comparo.check``, is :func:`comparo.pipeline.check`: it adds to these tables' rules the
checks of every later stage.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from comparo.base.errors import InputError, problems_frame
from comparo.reading.folder import read_folder
from comparo.validation.tables import CheckResult, Dataset, require_dataset, validate

__all__ = ["CheckResult", "Dataset", "as_dataset", "load"]


def load(folder: str | Path, *, strict: bool = True) -> Dataset:
    """Read and validate a dataset folder.

    Parameters
    ----------
    folder : path
        Folder holding observations (.csv/.tsv/.xlsx), sources (.csv/.bib) and
        optionally taxa.csv, tree.nwk and comparo.toml.
    strict : bool
        Raise on any error (default). With ``strict=False`` the rows with errors
        are kept with the problems attached (``ds.problems``) so that the audit
        can account for them.

    Raises
    ------
    comparo.InputError
        With every problem found (``.problems`` DataFrame), when errors exist.
    """
    raw = read_folder(folder)
    ds, problems = validate(raw)
    frame = problems_frame(problems)
    if ds is None or (strict and (frame["severity"] == "error").any()):
        raise InputError(frame)
    ds.problems = frame
    return ds


def as_dataset(ds: Any, name: str = "ds") -> Dataset:
    """*ds* when it is a :class:`Dataset`; a dataset folder (text or path) read with
    :func:`load`; else a UsageError saying what is accepted. The functions that take a dataset
    first take either (docs/api.md)."""
    if isinstance(ds, str | os.PathLike):
        return load(ds)
    return require_dataset(ds, name)
