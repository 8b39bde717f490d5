"""Every public recipe of the shared corpus, fixed with all tiers into a temp copy, passes the proof."""

from __future__ import annotations

import shutil

import pytest

from cfgcheck import api, fix

from .conftest import SHARED

CORPUS = SHARED / "corpus" / "public"


@pytest.mark.skipif(not CORPUS.is_dir(), reason="../shared/corpus/public is not present")
def test_every_public_recipe_is_fixed_safely(tmp_path):
    options = api.make_options(gpu="t4", rows=1000)  # a pre-Ampere card: precision fixes fire
    files = sorted(p for p in CORPUS.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
    assert files
    written = 0
    for src in files:
        copy = tmp_path / src.name
        shutil.copyfile(src, copy)
        result = fix.fix_file(copy, options, training=True)
        assert result.error is None, (src.name, result.error)
        if result.problem is not None:  # the loader's verdict; the fixer must leave it alone
            assert copy.read_bytes() == src.read_bytes()
            continue
        written += result.written
        assert result.written == result.changed
        again = fix.fix_file(copy, options, training=True)
        assert again.error is None and not again.changed, (src.name, again.diff())
        halved = fix.fix_file(copy, options, halve_batch=True, write=False)
        assert halved.error is None, (src.name, halved.error)
    assert written > 0  # the corpus has configs with something to fix on a T4
    assert sorted(p.name for p in tmp_path.iterdir()) == [p.name for p in files]  # no temp left
