"""``python -m coverkit`` runs the command line."""

import sys

from coverkit.cli import main

sys.exit(main())
