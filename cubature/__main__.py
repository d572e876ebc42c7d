"""``python -m cubage``: the same as the ``cubage`` command (quiet on Ctrl-C at any moment)."""

import sys

if __name__ == "__main__":
    try:
        from cubage.cli import main
    except KeyboardInterrupt:
        print("cubage: interrupted", file=sys.stderr)
        sys.exit(130)
    sys.exit(main())
