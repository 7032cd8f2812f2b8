"""``python -m comparo`` runs the command line."""

import sys

from comparo.cli import main

sys.exit(main())
