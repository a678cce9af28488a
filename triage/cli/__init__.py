"""The `triage` command: parses arguments, calls the application layer, prints with rich (or JSON with --json).

One module per group of commands; `parser` holds the whole command line. Every user error ends with exit code 2
and one clear line on stderr; a traceback only with --debug.
"""

from triage.cli.parser import build_parser, main

__all__ = ["build_parser", "main"]
