"""``python -m signfree`` is the same as the ``signfree`` command."""
import sys

from signfree.cli import main

sys.exit(main())
