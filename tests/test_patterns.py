"""Patterns compiled when first used behave as the compiled pattern (re module, the reference)."""

from __future__ import annotations

import re

import pytest

from cfgcheck._patterns import LazyPattern, later


@pytest.mark.parametrize("source, flags, text", [
    (r"\$\{([^${}]+)\}", 0, "a ${b} and ${c.d}"),
    (r"(?P<w>[a-z]+)-(\d+)", re.I, "Ab-12 cd-3 EF-45"),
    (r"^\s*\[\[?\s*tool\s*\.\s*cfgcheck\s*[\].]", re.M, "x = 1\n[tool.cfgcheck]\n"),
    ("[\ud800-\udfff]", 0, "ok\udcff here"),
])
def test_a_pattern_compiled_later_answers_as_re_compile(source, flags, text):
    lazy, ref = later(source, flags), re.compile(source, flags)
    assert lazy._compiled is None  # nothing compiled until asked
    assert repr(lazy.search(text)) == repr(ref.search(text))
    assert repr(lazy.match(text)) == repr(ref.match(text))
    assert repr(lazy.fullmatch(text)) == repr(ref.fullmatch(text))
    assert [m.span() for m in lazy.finditer(text)] == [m.span() for m in ref.finditer(text)]
    assert lazy.findall(text) == ref.findall(text)
    assert lazy.sub("#", text) == ref.sub("#", text)
    assert lazy.split(text) == ref.split(text)
    assert (lazy.pattern, lazy.flags, lazy.groups) == (ref.pattern, ref.flags, ref.groups)
    assert lazy.compiled() is lazy.compiled() is lazy._compiled  # compiled once


def test_module_patterns_that_only_some_inputs_reach_are_not_compiled_by_a_plain_lint(tmp_path):
    from cfgcheck import api, load, waivers

    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-4\nlora_r: 16\n")
    fresh = [load._JSON_CONSTANT, waivers._VERB]
    for p in fresh:
        p._compiled = None
    api.lint([str(cfg)], project=None)
    assert all(isinstance(p, LazyPattern) and p._compiled is None for p in fresh)
    (tmp_path / "bad.json").write_text('{"a": NaN}')
    report = api.lint([str(tmp_path / "bad.json")], project=None)
    assert report.files[0].problem.column == 7 and load._JSON_CONSTANT._compiled is not None
