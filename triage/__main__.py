"""`python -m triage` runs the command line."""

import sys

from triage.cli import main

sys.exit(main())
