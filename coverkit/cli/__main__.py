"""``python -m coverkit.cli`` runs the command line (as ``python -m coverkit`` does)."""

import sys

from coverkit.cli import main

sys.exit(main())
