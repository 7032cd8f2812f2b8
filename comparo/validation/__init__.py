"""Validation: the table schema and cross-column rules, synonyms, the temperature policy, the
settings of later steps, and the validated Dataset."""
