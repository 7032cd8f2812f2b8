"""Kept for code written against the first layout: the helpers live in :mod:`comparo.outputs`."""

from comparo.outputs import atomic_write_bytes, atomic_write_text, dumps, emit, print_problems  # noqa: F401
