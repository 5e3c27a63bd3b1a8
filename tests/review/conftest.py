from __future__ import annotations

import pytest
from review_helpers import build_demo_archive


@pytest.fixture(scope="session")
def demo_archive(tmp_path_factory):
    """The demo archive, built once (read it; copy it with ``.copy(tmp_path)`` before writing)."""
    return build_demo_archive(tmp_path_factory.mktemp("review-demo"))
