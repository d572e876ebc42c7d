"""``python -m cubage``: the same as the ``cubage`` command."""

import sys

from cubage.cli.commands import main

if __name__ == "__main__":
    sys.exit(main())
