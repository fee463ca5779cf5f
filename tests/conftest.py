import os

import pytest

os.environ.setdefault("OMP_NUM_THREADS", "1")


@pytest.fixture
def root(tmp_path):
    """A fresh results root."""
    return tmp_path / "results"
