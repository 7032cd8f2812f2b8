"""``python -m comparo`` runs the command line."""

import sys

from comparo.cli.main import main

sys.exit(main())
