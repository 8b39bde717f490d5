"""Linked configs: a trainer's or accelerate's DeepSpeed file is read and checked with the config.

The mismatch semantics follow transformers' HfTrainerDeepSpeedConfig (integrations/deepspeed.py):
a non-"auto" DeepSpeed value that differs from the training arguments stops the launch.
"""

from __future__ import annotations

import json

from cfgcheck import api
from cfgcheck.findings import Severity

RULE = "deepspeed-file-contradicts-config"


def _write(tmp_path, ds: dict, cfg: str, ds_name="ds.json", cfg_name="train.yaml"):
    (tmp_path / ds_name).write_text(json.dumps(ds), encoding="utf-8")
    path = tmp_path / cfg_name
    path.write_text(cfg, encoding="utf-8")
    return path


def _hits(path, **options):
    report = api.lint([str(path)], **options)
    assert not report.problems and not report.internal
    return [f for f in report.findings if f.rule == RULE]


def test_micro_batch_contradiction_in_a_relative_file(tmp_path):
    path = _write(tmp_path, {"train_micro_batch_size_per_gpu": 2, "gradient_accumulation_steps": "auto",
                             "zero_optimization": {"stage": 2}},
                  "learning_rate: 2.0e-5\nper_device_train_batch_size: 4\ndeepspeed: ds.json\n")
    hits = _hits(path)
    assert [(f.key, f.severity) for f in hits] == [("per_device_train_batch_size", Severity.ERROR)]
    assert hits[0].data["ds_value"] == 2 and hits[0].data["value"] == 4
    assert hits[0].line == 2  # reported where the config wrote the batch


def test_trainer_default_counts_when_the_config_is_silent(tmp_path):
    # transformers TrainingArguments: gradient_accumulation_steps defaults to 1
    path = _write(tmp_path, {"train_micro_batch_size_per_gpu": "auto", "gradient_accumulation_steps": 4,
                             "zero_optimization": {"stage": 2}},
                  "learning_rate: 2.0e-5\nper_device_train_batch_size: 4\ndeepspeed: ds.json\n")
    hits = _hits(path)
    assert [f.data["where"] for f in hits] == ["the default"]
    assert hits[0].key == "deepspeed"


def test_auto_is_never_a_contradiction(tmp_path):
    path = _write(tmp_path, {"train_micro_batch_size_per_gpu": "auto", "gradient_accumulation_steps": "auto",
                             "bf16": {"enabled": "auto"}, "zero_optimization": {"stage": 3}},
                  "learning_rate: 2.0e-5\nper_device_train_batch_size: 4\ngradient_accumulation_steps: 8\n"
                  "bf16: true\ndeepspeed: ds.json\n")
    assert _hits(path) == []


def test_precision_contradiction(tmp_path):
    path = _write(tmp_path, {"train_micro_batch_size_per_gpu": "auto", "fp16": {"enabled": True},
                             "zero_optimization": {"stage": 2}},
                  "learning_rate: 2.0e-5\nfp16: false\nbf16: true\ndeepspeed: ds.json\n")
    assert [f.key for f in _hits(path)] == ["fp16"]


def test_accelerate_deepspeed_config_file(tmp_path):
    sub = tmp_path / "ds"
    sub.mkdir()
    (sub / "z2.json").write_text(json.dumps({"train_micro_batch_size_per_gpu": "auto",
                                             "gradient_accumulation_steps": 2,
                                             "zero_optimization": {"stage": 2}}), encoding="utf-8")
    cfg = tmp_path / "launch.yaml"
    cfg.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 2\n"
                   "deepspeed_config:\n  deepspeed_config_file: ds/z2.json\n  gradient_accumulation_steps: 4\n",
                   encoding="utf-8")
    hits = _hits(cfg)
    assert [(f.key, f.severity) for f in hits] == [("deepspeed_config.gradient_accumulation_steps",
                                                    Severity.WARNING)]


def test_missing_file_says_so_once_at_info(tmp_path):
    path = tmp_path / "train.yaml"
    path.write_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\ndeepspeed: nowhere/ds.json\n",
                    encoding="utf-8")
    hits = _hits(path)
    assert len(hits) == 1 and hits[0].severity == Severity.INFO
    assert "nowhere/ds.json was not found" in hits[0].message


def test_urls_are_never_fetched(tmp_path):
    path = tmp_path / "train.yaml"
    path.write_text("learning_rate: 2.0e-5\ndeepspeed: https://example.invalid/ds.json\n", encoding="utf-8")
    hits = _hits(path)
    assert len(hits) == 1 and "only local files" in hits[0].message


def test_a_broken_linked_file_is_not_an_input_problem_of_the_config(tmp_path):
    (tmp_path / "ds.json").write_text("{\"train_batch_size\": ", encoding="utf-8")
    path = tmp_path / "train.yaml"
    path.write_text("learning_rate: 2.0e-5\ndeepspeed: ds.json\n", encoding="utf-8")
    hits = _hits(path)
    assert len(hits) == 1 and hits[0].severity == Severity.INFO and "ds.json:1:" in hits[0].message
