import os
from pathlib import Path

import pytest

try:
    from hypothesis import settings

    settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
    settings.register_profile("dev", deadline=None)
    settings.register_profile("long", max_examples=5000, deadline=None)
    settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci" if os.environ.get("CI") else "dev"))
except ImportError:  # pragma: no cover
    pass

ROOT = Path(__file__).resolve().parents[1]
SHARED = ROOT.parent / "shared"


@pytest.fixture
def shared_dir() -> Path:
    if not SHARED.is_dir():
        pytest.skip("../shared is not present beside the checkout")
    return SHARED
