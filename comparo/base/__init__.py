"""Foundations used by every room: errors, the rule registry, argument checks, units, the
quantity catalogue, atomic outputs, JSON-safe numbers, the one number formatter, progress bar,
log transform and figure style, quantiles, the result protocol and notebook display."""
