"""`python -m triage.cli`, the same as the `triage` command."""

import sys

from triage.cli.parser import main

sys.exit(main())
