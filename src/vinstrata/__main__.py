"""``python -m vinstrata`` runs the CLI."""

import sys

from vinstrata.cli import main

sys.exit(main())
