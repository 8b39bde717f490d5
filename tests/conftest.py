import atexit
import os
import shutil
import tempfile
from pathlib import Path

import pytest

# Which model a config resolves to may depend on a local model hub cache. Pin that input: every
# test (and every process a test starts) sees an empty cache, so results do not depend on the
# machine; tests that exercise the cache build their own and pass it explicitly.
_EMPTY_HUB = tempfile.mkdtemp(prefix="cfgcheck-empty-hub-")
os.environ["HF_HOME"] = _EMPTY_HUB
os.environ["HF_HUB_CACHE"] = os.path.join(_EMPTY_HUB, "hub")
os.environ["HF_HUB_OFFLINE"] = "1"

# The result cache of `cfgcheck lint` is on in the suite (every test that lints a file twice is an
# invalidation check), in a folder of this session: the user's own cache folder is never written.
os.environ["CFGCHECK_CACHE_DIR"] = _TEST_CACHE = tempfile.mkdtemp(prefix="cfgcheck-test-cache-")
# both folders go when the session ends (the cache holds a few MB a run)
for _folder in (_EMPTY_HUB, _TEST_CACHE):
    atexit.register(shutil.rmtree, _folder, ignore_errors=True)

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
