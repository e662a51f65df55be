"""Session-wide test settings."""

from __future__ import annotations

import os
import shutil
import tempfile

# The model cache of this test session lives in a fresh folder (removed at the
# end), never in the user's own cache; subprocesses inherit it.
_CACHE = tempfile.mkdtemp(prefix="branchline-test-cache-")
os.environ["BRANCHLINE_CACHE_DIR"] = _CACHE


def pytest_sessionfinish(session, exitstatus):
    shutil.rmtree(_CACHE, ignore_errors=True)
