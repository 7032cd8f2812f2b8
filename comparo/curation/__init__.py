"""Curation: harmonisation (harmonise), values combined per taxon (combine), the per-taxon
table (aggregation), what check reports about the harmonised rows (findings), the audit of
provenance (provenance) and the import of a curator's wide sheet (importing)."""
