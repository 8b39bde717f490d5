"""The bundled key lists against the installed reference libraries (skipped without them)."""

from __future__ import annotations

import dataclasses

import pytest

from cfgcheck.knowledge.keys import _data, lookup

transformers = pytest.importorskip("transformers")
peft = pytest.importorskip("peft")


def _init_fields(cls) -> set[str]:
    return {f.name for f in dataclasses.fields(cls) if f.init and not f.name.startswith("_")}


def test_every_installed_training_arguments_field_is_a_known_trainer_key():
    missing = sorted(n for n in _init_fields(transformers.TrainingArguments) if lookup(n, "trainer") is None)
    assert missing == []


def test_every_installed_lora_config_field_is_a_known_adapter_key():
    missing = sorted(n for n in _init_fields(peft.LoraConfig) if lookup(n, "peft-adapter") is None)
    assert missing == []


def test_installed_transformers_matches_the_scan_of_the_same_version():
    """If the installed release was scanned, the AST scan and the runtime dataclass agree both ways."""
    version = transformers.__version__
    if version not in _data()["scanned"]["transformers"]:
        pytest.skip(f"transformers {version} is not one of the scanned versions")
    runtime = _init_fields(transformers.TrainingArguments) | _init_fields(transformers.Seq2SeqTrainingArguments)
    scanned_here = set()
    for name, info in _data()["infos"]["trainer"].items():
        rng = info.accepted.get("transformers")
        if rng is None:
            continue
        order = _data()["scanned"]["transformers"]
        if order.index(rng[0]) <= order.index(version) <= order.index(rng[1]):
            scanned_here.add(name)
    assert scanned_here == runtime


def test_installed_peft_lora_fields_are_accepted_by_the_installed_version():
    version = peft.__version__
    order = _data()["scanned"]["peft"]
    if version not in order:
        pytest.skip(f"peft {version} is not one of the scanned versions")
    for name in _init_fields(peft.LoraConfig):
        first, last = lookup(name, "peft-adapter").accepted["peft"]
        assert order.index(first) <= order.index(version) <= order.index(last), name
