"""``python -m massfit`` runs the command line."""

import sys

from massfit.cli.commands import main

sys.exit(main())
