"""Oscillation traces: one trace reduced to numbers (oscillation) and the traces table with its files (files)."""
