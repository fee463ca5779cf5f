import atexit
import os
import shutil
import tempfile

import pytest

os.environ.setdefault("OMP_NUM_THREADS", "1")
# Tests never touch the user's caches: stopwise's processed-problem cache and openml's
# cache live in a temporary folder for the whole session (set before openml is imported,
# which reads OPENML_CACHE_DIR once).
_SESSION_TMP = tempfile.mkdtemp(prefix="stopwise-tests-")
atexit.register(shutil.rmtree, _SESSION_TMP, True)
os.environ["STOPWISE_CACHE"] = os.path.join(_SESSION_TMP, "stopwise-cache")
os.environ["OPENML_CACHE_DIR"] = os.path.join(_SESSION_TMP, "openml-cache")


@pytest.fixture
def root(tmp_path):
    """A fresh results root."""
    return tmp_path / "results"
