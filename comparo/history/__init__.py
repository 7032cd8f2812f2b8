"""Versions of a compilation: two versions compared (versions) and two curators' copies
merged (merging)."""
