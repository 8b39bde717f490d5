"""Every public recipe of the shared corpus, fixed with all tiers into a temp copy, passes the proof."""

from __future__ import annotations

import re
import shutil
from collections import Counter

import pytest

from cfgcheck import api, fix

from .conftest import SHARED

CORPUS = SHARED / "corpus" / "public"


@pytest.mark.skipif(not CORPUS.is_dir(), reason="../shared/corpus/public is not present")
@pytest.mark.parametrize("opts", [
    {"gpu": "t4", "rows": 1000},  # a pre-Ampere card (compute capability 7.5): precision fixes fire
    {"gpu": "a100-80gb"},  # compute capability 8.0: bf16 stays, memory is judged against 80 GB
], ids=["t4", "a100-80gb"])
def test_every_public_recipe_is_fixed_safely(tmp_path, opts):
    options = api.make_options(**opts)
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


# Mistakes seeded into the real recipes, in their own spelling, so that the fixes of the rules
# that no public recipe trips still meet real layouts: each rewrite must pass the proof.
_SEEDS = {
    "constant-schedule-ignores-warmup": lambda t: re.sub(
        r"^(\s*lr_scheduler(?:_type)?:[ \t]*)(cosine|linear)\b", r"\1constant", t, flags=re.M),
    "warmup-longer-than-run": lambda t: re.sub(
        r"^(\s*warmup_ratio:[ \t]*)[0-9.e-]+", r"\g<1>0.4", t, flags=re.M),
    "best-model-needs-matching-cadence": lambda t: re.sub(
        r"^(\s*eval_strategy:[ \t]*)\S+", r"\1epoch", t, flags=re.M) + "\nload_best_model_at_end: true\n"
        if re.search(r"^\s*eval_strategy:", t, re.M) else t,
    "seq-len-above-context-window": lambda t: re.sub(
        r"^(\s*(?:max_seq_length|sequence_len|cutoff_len):[ \t]*)\d+", r"\g<1>1000000", t, flags=re.M),
    "loftq-with-quantised-base": lambda t: t + "\ninit_lora_weights: loftq\n"
        if re.search(r"^load_in_4bit:[ \t]*true", t, re.M) else t,
}


@pytest.mark.skipif(not CORPUS.is_dir(), reason="../shared/corpus/public is not present")
def test_fixes_of_seeded_mistakes_in_public_recipes_pass_the_proof():
    options = api.make_options(gpu="a100-80gb", rows=1000)
    files = sorted(p for p in CORPUS.iterdir() if p.suffix in (".yaml", ".yml"))
    applied = Counter()
    for src in files:
        text = src.read_text(encoding="utf-8")
        for rule, seed in _SEEDS.items():
            seeded = seed(text)
            if seeded == text:
                continue
            result = fix.fix_text(seeded, src.name, options, training=True)
            assert result.error is None, (src.name, rule, result.error)
            if result.problem is None and any(a.rule == rule for a in result.applied):
                applied[rule] += 1
                again = fix.fix_text(result.new_text, src.name, options, training=True)
                assert again.error is None and not again.changed, (src.name, rule, again.diff())
    # every seeded rule's fix is made on several real recipes (counts on the corpus as stored)
    assert set(applied) == set(_SEEDS) and min(applied.values()) >= 5, applied
