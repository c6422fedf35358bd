"""Test-wide settings: Gauss-Legendre rules are cached in a temporary folder
made for the test run, not in the user's cache."""
import os
import tempfile

os.environ.setdefault("SIGNFREE_CACHE", tempfile.mkdtemp(prefix="signfree-cache-"))
