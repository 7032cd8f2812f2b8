# ruff: noqa: B018  (a vulture whitelist is made of bare names: each one is a use)
"""Names the dead-code scan (vulture, tests/test_dead_code.py) cannot see used.

Three kinds, each checked by hand with grep before it was listed here:

* used only dynamically: the module ``__getattr__``/``__dir__`` of comparo's lazy public API,
  attributes set on objects of other libraries (argparse, expat, openpyxl) that those libraries
  read;
* public functions, methods and result fields that the package itself does not call but users
  do, and that tests check against outside references (documented in docs/);
* nothing else: a new finding is dead code to remove, or a name to add here with its reason.
"""

from types import SimpleNamespace

import comparo
from comparo.base.units import same_dimension
from comparo.curation.harmonise import q10_from_activation_energy
from comparo.fitting.flags import influence
from comparo.phylo.outliers import loo_z
from comparo.validation.schema import pandera_schema

_ = SimpleNamespace()

# lazy public API (PEP 562 module attributes)
comparo.__getattr__
comparo.__dir__

# attributes other libraries read: argparse, expat, openpyxl cells, fonts and sheets
_.formatter_class
_.StartElementHandler
_.data_type
_.quotePrefix
_.font
_.comment
_.freeze_panes

# public API used by callers and checked by tests/reference against outside references
same_dimension  # listed in the comparo.base.units docstring; tests/test_unit_facts.py
q10_from_activation_energy  # docs/methods/temperature.md; tests/reference/test_curate_reference.py
influence  # tests/test_flags.py against statsmodels OLSInfluence
loo_z  # tests/test_phylo_outliers.py
pandera_schema  # tests/test_validate.py compares it with schema_failures
_.covariance  # FlatTree.covariance: the dense C for checks (tests/reference)
_.objective  # LTSLine.objective: the trimmed sum of squares (tests/reference)
_.root_var  # Imputation.root_var: a result field (read by users and asdict)
_.clear  # SharedRecord: dict methods made read-only (called by code that would mutate it)
_.popitem  # SharedRecord: as clear
