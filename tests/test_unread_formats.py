"""Formats cfgcheck does not read are recognised and named, never read as another layout.

The configs are invented in the shape of each format's published examples (from memory).
"""

from __future__ import annotations

import pytest

from cfgcheck import engine, findings, load, view
from cfgcheck.render.text import summary_line

from .conftest import ROOT, SHARED

NEOX_YAML = """\
{
  "pipe-parallel-size": 1,
  "model-parallel-size": 1,
  "num-layers": 24,
  "hidden-size": 2048,
  "num-attention-heads": 16,
  "seq-length": 2048,
  "max-position-embeddings": 2048,
  "pos-emb": "rotary",
  "train_micro_batch_size_per_gpu": 4,
  "gradient_accumulation_steps": 1,
  "zero_optimization": {"stage": 1, "allgather_partitions": true},
  "optimizer": {"type": "Adam", "params": {"lr": 0.0002}},
  "fp16": {"enabled": true},
}
"""

CASES = {
    "gpt-neox": (NEOX_YAML, "yaml"),
    "deepspeed-autotuning": ('{"train_micro_batch_size_per_gpu": [1, 2, 4], "zero_optimization": {"stage": [1, 2, 3]},'
                             ' "autotuning": {"enabled": true}}', "json"),
    "composed": ("defaults:\n  - model: tiny\n  - optim: adamw\n  - _self_\nlearning_rate: 1.0e-4\n", "yaml"),
    "lightning": ("trainer:\n  accelerator: gpu\n  devices: 8\n  max_epochs: 3\n  precision: bf16-mixed\n"
                  "model:\n  learning_rate: 1.0e-4\n", "yaml"),
    "llm-foundry": ("max_seq_len: 2048\nglobal_train_batch_size: 64\ndevice_train_microbatch_size: 4\n"
                    "max_duration: 1ep\noptimizer:\n  name: decoupled_adamw\n  lr: 6.0e-4\n", "yaml"),
    "ludwig": ("model_type: llm\nbase_model: acme/tiny-7b\ninput_features:\n  - name: prompt\n    type: text\n"
               "output_features:\n  - name: answer\n    type: text\n", "yaml"),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_unread_format_is_named_not_misread(name):
    text, fmt = CASES[name]
    report = engine.lint_text(text, f"cfg.{fmt}", fmt=fmt)
    assert report.problem is None
    assert report.layout is None, f"read as {report.layout}"
    assert report.findings == []
    assert report.skipped.endswith(f"({name}): not a format cfgcheck reads (yet)")


def test_summary_names_the_unread_formats():
    rep = findings.Report(files=[engine.lint_text(CASES["gpt-neox"][0], "a.yml"),
                               engine.lint_text(CASES["composed"][0], "b.yaml"),
                               engine.lint_text("jobs:\n  x: 1\nruns-on: linux\nsteps: []\n", "c.yaml"),
                               engine.lint_text("learning_rate: 2.0e-5\nper_device_train_batch_size: 4\n", "d.yaml")])
    line = summary_line(rep)
    assert "1 config checked" in line
    assert "1 skipped (not training configs)" in line
    assert "2 not a format cfgcheck reads (yet): composed, gpt-neox" in line


def test_a_deepspeed_file_with_autotuning_on_but_one_value_each_is_still_read():
    # DeepSpeedExamples training/autotuning/hf/dsconfigs/ds_config_tune.json has this shape
    text = '{"train_micro_batch_size_per_gpu": "auto", "autotuning": {"enabled": true, "fast": true}}'
    report = engine.lint_text(text, "ds.json", fmt="json")
    assert report.layout == "deepspeed"


def test_a_trainer_file_with_a_trainer_section_of_its_own_is_still_read():
    text = "model_name_or_path: acme/tiny-1b\ntrainer:\n  learning_rate: 2.0e-5\n  max_epochs: 3\n"
    report = engine.lint_text(text, "run.yaml")
    assert report.layout == "trainer"


# documents of one key structure whose values decide the format: the structure's open formats
# are worked out on the first and must still let the second's values decide
SAME_KEYS_OTHER_VALUES = [
    ("defaults:\n  - model: tiny\n  - _self_\nlearning_rate: 1.0e-4\n",
     "defaults: none\nlearning_rate: 1.0e-4\n"),
    ('{"train_micro_batch_size_per_gpu": 4, "zero_optimization": {"stage": [1, 2, 3]}}',
     '{"train_micro_batch_size_per_gpu": 4, "zero_optimization": {"stage": 2}}'),
    ('{"train_micro_batch_size_per_gpu": [1, 2, 4], "gradient_accumulation_steps": 1}',
     '{"train_micro_batch_size_per_gpu": 4, "gradient_accumulation_steps": 1}'),
    ("base: recipes/base.yaml\nlearning_rate: 2.0e-5\nper_device_train_batch_size: 4\n",
     "base: 3\nlearning_rate: 2.0e-5\nper_device_train_batch_size: 4\n"),
    ("model:\n  class_path: acme.TinyModel\n  init_args:\n    lr: 0.001\n",
     "model:\n  class_path: 3\n  init_args:\n    lr: 0.001\n"),
]


def _documents():
    texts = [t for t, _fmt in CASES.values()] + [t for pair in SAME_KEYS_OTHER_VALUES for t in pair]
    texts += [t for pair in SAME_KEYS_OTHER_VALUES for t in reversed(pair)]
    roots = [r for r in (ROOT / "fixtures", SHARED / "corpus" / "public") if r.is_dir()]
    for path in engine.expand_paths(roots):
        try:
            texts.append(load.read_source(path).text)
        except load.LoadError:
            continue
    for text in texts:
        try:
            docs = load.load_text(text, "cfg.yaml")
        except load.LoadError:
            continue
        yield from (d.data for d in docs)


def test_the_formats_worked_out_per_key_structure_are_those_of_each_document():
    seen = 0
    for order in (1, -1):  # each document once after, once before the others of its structure
        view._OPEN_FORMATS_BY_SHAPE_CACHE.clear()
        for data in list(_documents())[::order]:
            data_shape = view.shape(data)
            if data_shape is None:
                continue
            assert view.unread_format(data, data_shape) == view.unread_format(data), data
            seen += 1
    assert seen > 100


@pytest.mark.parametrize("pair", SAME_KEYS_OTHER_VALUES, ids=range(len(SAME_KEYS_OTHER_VALUES)))
def test_documents_of_one_key_structure_are_told_apart_by_their_values(pair):
    view._OPEN_FORMATS_BY_SHAPE_CACHE.clear()
    a, b = (load.load_text(t, "cfg.yaml")[0].data for t in pair)
    assert view.shape(a) == view.shape(b)
    for first, second in ((a, b), (b, a)):  # whichever fills the structure's entry first
        view._OPEN_FORMATS_BY_SHAPE_CACHE.clear()
        view.unread_format(first, view.shape(first))
        assert view.unread_format(second, view.shape(second)) == view.unread_format(second)
    assert view.unread_format(a) is not None and view.unread_format(b) is None
