"""Foundations used by every room: errors, argument checks, units, the quantity catalogue, atomic outputs, JSON-safe numbers, quantiles, notebook display."""
