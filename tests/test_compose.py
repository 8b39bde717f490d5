"""Composed configs: a defaults list, a named base file and key=value overrides are composed the
way the loaders do, and each finding is located in the file that set the value.

Files are invented (our own organisations and tasks).
"""

from __future__ import annotations

import json

from cfgcheck import api, engine
from cfgcheck.compose import compose
from cfgcheck.load import load_text


def _write(folder, name, text):
    path = folder / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


def _findings(path, **options):
    report = engine.lint_file(path, engine.Options(**options))
    assert report.problem is None and not report.internal
    return report


def test_defaults_list_composes_groups_and_self_last(tmp_path):
    _write(tmp_path, "model/llama2.yaml", "name_or_path: meta-llama/Llama-2-7b-hf\n")
    _write(tmp_path, "base.yaml", "learning_rate: 2.0e-5\nper_device_train_batch_size: 4\n")
    run = _write(tmp_path, "run.yaml", "defaults:\n  - base\n  - model: llama2\nlearning_rate: 1.0e-4\n")
    doc = compose(load_text(run.read_text(), str(run))[0], str(run))
    # Hydra 1.1 "The Defaults List": without _self_, the primary config's own values go last
    assert doc.data == {"learning_rate": 1.0e-4, "per_device_train_batch_size": 4,
                        "model": {"name_or_path": "meta-llama/Llama-2-7b-hf"}}
    assert doc.origins[("model", "name_or_path")] == str(tmp_path / "model" / "llama2.yaml")
    assert doc.overrides[("learning_rate",)] == [str(tmp_path / "base.yaml"), str(run)]


def test_self_first_lets_the_defaults_override(tmp_path):
    _write(tmp_path, "base.yaml", "learning_rate: 2.0e-5\n")
    run = _write(tmp_path, "run.yaml", "defaults:\n  - _self_\n  - base\nlearning_rate: 1.0e-4\n")
    doc = compose(load_text(run.read_text(), str(run))[0], str(run))
    assert doc.data["learning_rate"] == 2.0e-5


def test_a_finding_is_located_in_the_file_that_set_the_value(tmp_path):
    # the constant schedule is written in the base file, the warm-up in the run file
    _write(tmp_path, "base.yaml", "model_name_or_path: acme/tiny-1b\nper_device_train_batch_size: 4\n"
                                  "lr_scheduler_type: constant\n")
    run = _write(tmp_path, "run.yaml", "base_config: base.yaml\nwarmup_steps: 100\nlearning_rate: 2.0e-5\n")
    report = _findings(run)
    hits = [f for f in report.findings if f.rule == "constant-schedule-ignores-warmup"]
    assert len(hits) == 1
    assert hits[0].file == str(tmp_path / "base.yaml") and hits[0].line == 3
    assert hits[0].fix is None  # the fix of one file is never written from another file's lint
    assert not [f for f in report.findings if f.rule == "unknown-key" and f.key == "base_config"]


def test_the_note_says_which_file_overrode_which(tmp_path):
    _write(tmp_path, "base.yaml", "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
                                  "per_device_train_batch_size: 4\n")
    run = _write(tmp_path, "run.yaml", "defaults:\n  - base\n  - _self_\nlearning_rate: 1.0e-4\n")
    report = _findings(run)
    hits = [f for f in report.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word != "info"]
    assert hits and hits[0].file == str(run) and hits[0].line == 4
    assert hits[0].data["overrides"] == "run.yaml overrides base.yaml"


def test_command_line_overrides_win(tmp_path):
    run = _write(tmp_path, "run.yaml", "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
                                       "per_device_train_batch_size: 4\n")
    quiet = _findings(run)
    assert not [f for f in quiet.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word != "info"]
    loud = api.lint([run], project=None, overrides=["learning_rate=1e-4", "+gradient_accumulation_steps=2"])
    hits = [f for f in loud.findings if f.rule == "full-finetune-lr-too-high" and f.severity.word != "info"]
    assert hits and hits[0].data["overrides"] == "the command line overrides run.yaml"


def test_a_missing_file_in_the_defaults_is_named_not_misread(tmp_path):
    run = _write(tmp_path, "run.yaml", "defaults:\n  - model: nowhere\nlearning_rate: 1.0e-4\n")
    report = _findings(run)
    assert report.layout is None and report.findings == []
    assert report.skipped.endswith("(composed): not a format cfgcheck reads (yet)")
    assert "nowhere" in report.compose_problem


def test_a_defaults_list_means_an_omegaconf_reader(tmp_path):
    _write(tmp_path, "base.yaml", "per_device_train_batch_size: 4\n")
    run = _write(tmp_path, "run.yaml", "defaults:\n  - base\nlearning_rate: 2e-5\n")
    report = _findings(run)
    hits = [f for f in report.findings if f.rule == "yaml-version-dependent-value"]
    # omegaconf 2.3.0 _utils.py get_yaml_loader: a float resolver that accepts 2e-5
    assert hits and hits[0].severity.word == "info" and "OmegaConf" in hits[0].message


def test_composition_is_bounded_and_cycles_stop(tmp_path):
    _write(tmp_path, "a.yaml", "base_config: b.yaml\nlearning_rate: 1.0e-5\n")
    _write(tmp_path, "b.yaml", "base_config: a.yaml\nper_device_train_batch_size: 2\n")
    report = _findings(tmp_path / "a.yaml")
    assert report.problem is None and not report.internal


def test_fix_never_writes_a_value_another_file_set(tmp_path):
    from cfgcheck import fix as fixmod

    base = _write(tmp_path, "base.yaml", "model_name_or_path: acme/tiny-1b\nper_device_train_batch_size: 4\n"
                                         "lr_scheduler_type: constant\n")
    run = _write(tmp_path, "run.yaml", "base_config: base.yaml\nwarmup_steps: 100\nlearning_rate: 2.0e-5\n")
    before = (base.read_text(), run.read_text())
    fixmod.fix_paths([run], training=True)
    assert (base.read_text(), run.read_text()) == before


def test_json_output_carries_the_override_note(tmp_path):
    from cfgcheck.render import render

    _write(tmp_path, "base.yaml", "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n")
    run = _write(tmp_path, "run.yaml", "base_config: base.yaml\nlearning_rate: 1.0e-4\n")
    report = api.lint([run], project=None)
    data = json.loads(render("json", report, report.findings))
    notes = [f["data"].get("overrides") for f in data["findings"] if f["rule"] == "full-finetune-lr-too-high"]
    assert "run.yaml overrides base.yaml" in notes


def test_a_base_file_that_cannot_be_read_leaves_the_config_unread(tmp_path):
    for name in ["nowhere.yaml", "x" * 300 + ".yaml", "a\x00b.yaml"]:
        run = _write(tmp_path, "run.yaml", f"base_config: {json.dumps(name)}\nlearning_rate: 1.0e-4\n")
        report = _findings(run)
        assert report.layout is None and report.findings == [], name
        assert report.skipped.endswith("(composed): not a format cfgcheck reads (yet)")


def test_a_malformed_override_is_an_input_error(tmp_path):
    import pytest

    run = _write(tmp_path, "run.yaml", "learning_rate: 2.0e-5\n")
    with pytest.raises(ValueError, match="not KEY=VALUE"):
        api.lint([run], project=None, overrides=["learning_rate"])
    report = api.lint([run], project=None, overrides=["~learning_rate", "+a.b=1"])
    assert not report.problems and not report.internal
