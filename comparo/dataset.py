"""A dataset folder, read and validated: :func:`load` and :class:`Dataset`.

This module sits on top of reading (:mod:`comparo.io`, raw tables only) and
validation (:mod:`comparo.validate`, which imports reading); neither of them
imports this one.
"""

from __future__ import annotations

from comparo.io import Dataset, load

__all__ = ["Dataset", "load"]
