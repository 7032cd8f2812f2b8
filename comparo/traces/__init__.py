"""Oscillation traces: one trace reduced to numbers (oscillation), the traces table with its
files (files), and the reduced traces as rows of the harmonised table (rows)."""
