"""``python -m troubleshoot`` runs the command line."""

import sys

from troubleshoot.cli import main

sys.exit(main())
