"""Session-wide test set-up (root level so it also covers the notebooks in worksheets/)."""

from __future__ import annotations

import os
import tempfile


def pytest_configure(config):
    """Keep worksheet autosaves of test runs out of the repository (notebook kernels inherit it)."""
    if not os.environ.get("PFTWORK_AUTOSAVE_DIR"):
        os.environ["PFTWORK_AUTOSAVE_DIR"] = tempfile.mkdtemp(prefix="pftwork-autosave-")
