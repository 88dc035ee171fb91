"""``python -m mesastrain`` runs the command line."""

import sys

from mesastrain.cli.main import main

sys.exit(main())
