"""``python -m signfree`` is the same as the ``signfree`` command."""
import sys

try:
    from signfree.cli import main
except KeyboardInterrupt:          # Ctrl-C while the command line loads
    sys.stderr.write("signfree: interrupted; nothing written\n")
    sys.exit(130)

sys.exit(main())
