"""The ``cubage`` command line (argparse), its terminal display and exit codes."""

import sys


def main(argv=None) -> int:
    """The ``cubage`` command (:func:`cubage.cli.commands.main`), quiet on Ctrl-C while it loads."""
    try:
        from cubage.cli.commands import main as _main
    except KeyboardInterrupt:
        print("cubage: interrupted", file=sys.stderr)
        return 130
    return _main(argv)


__all__ = ["main"]
