"""The ``cubage`` command line (argparse), its terminal display and exit codes."""

from cubage.cli.commands import main

__all__ = ["main"]
