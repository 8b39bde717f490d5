"""What cfgcheck reads and what it calls unknown agree: no key that a layout's field specs (and so
the rules through the view) read is reported by unknown-key, in any layout that has key lists."""

from __future__ import annotations

import json

import pytest

from cfgcheck.catalogue import load_catalogue
from cfgcheck.knowledge import keys
from cfgcheck.layouts import LAYOUTS, keys_read

from .helpers import lint

JUDGED = [lay for lay in LAYOUTS if lay.name in keys.layouts()]


def _doc_with(key: str) -> dict:
    """A mapping that holds KEY (dotted: nested) with a plain value."""
    parts = key.split(".")
    doc: dict = {}
    cur = doc
    for part in parts[:-1]:
        cur = cur.setdefault(part, {})
    cur[parts[-1]] = 1
    return doc


def _unknown(f) -> bool:
    """A finding that calls a key unknown or a typo (not the note on a renamed or removed key)."""
    return f.rule == "unknown-key" and f.data.get("variant") in ("typo", "spelling", "unknown")


def _cases():
    for lay in JUDGED:
        for key in sorted(keys_read(lay)):
            yield pytest.param(lay.name, key, id=f"{lay.name}:{key}")


@pytest.mark.parametrize("layout,key", list(_cases()))
def test_a_key_a_field_spec_reads_is_not_reported_unknown(layout, key):
    # a one-key file may be detected as another layout, so the check runs on a view of this one
    from cfgcheck import engine, findings
    from cfgcheck.load import load_text
    from cfgcheck.view import build_view

    doc = load_text(json.dumps(_doc_with(key)), "case.json", "json")[0]
    view = build_view(doc, layout)
    out = findings.FileReport(file="case.json")
    engine.lint_view(view, engine.Options(only=frozenset({"unknown-key"})), "case.json", out)
    assert [f.message for f in out.findings if f.key == key and _unknown(f)] == []


@pytest.mark.parametrize("key", ["init_lora_weights", "loftq_config", "added_tokens", "bnb_4bit_compute_dtype"])
def test_adapter_and_tokenizer_keys_of_trainer_recipes_are_known(key):
    # keys that PEFT's LoraConfig, BitsAndBytesConfig and tokenizer setup take, which trainer-style
    # recipes write beside the training arguments
    text = f"model_name_or_path: acme/tiny-7b\nlearning_rate: 2.0e-5\nuse_peft: true\n{key}: x\n"
    report = lint(text, only=["unknown-key"])
    assert [f for f in report.findings if f.key == key and _unknown(f)] == []


def test_a_misspelt_read_key_is_still_reported():
    # the exemption is for the exact keys read; a typo of one is still a typo (PEFT LoraConfig
    # spells init_lora_weights)
    report = lint("model_name_or_path: acme/tiny-7b\nlearning_rate: 2.0e-5\ninit_lora_weigths: true\n",
                  only=["unknown-key"])
    assert "init_lora_weigths" in {f.key for f in report.findings}


def test_no_catalogue_example_has_a_read_key_reported_unknown():
    from .test_catalogue import _run as run_example

    """Every rule's example configs: a key some field spec reads is never called unknown."""
    read = set().union(*(keys_read(lay) for lay in LAYOUTS))
    for rule in load_catalogue().values():
        for kind in ("bad", "good"):
            for ex in rule.examples.get(kind, []):
                report = run_example(ex)  # with the files it names written beside it
                wrong = [f.key for f in report.findings if _unknown(f) and f.key in read]
                assert wrong == [], (rule.id, kind, wrong)
