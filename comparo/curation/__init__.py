"""Curation: harmonisation, the per-taxon table and the audit of provenance."""
