"""Test-wide settings: Gauss-Legendre rules are cached in a folder of the
test session, not in the user's cache."""
import os
import tempfile

os.environ.setdefault("SIGNFREE_CACHE", tempfile.mkdtemp(prefix="signfree-cache-"))
