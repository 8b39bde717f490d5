"""The rules on distributed runs, preference / RL training, weights that cannot train and keys
against the release in use: their numbers, their certainty and where they point."""

from __future__ import annotations

import contextlib
import json
import os

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity
from cfgcheck.knowledge import pins
from cfgcheck.knowledge.trainers import guess

from .helpers import lint


def _hits(report, rule):
    assert report.problem is None and not report.internal, (report.problem, report.internal)
    return [f for f in report.findings if f.rule == rule]


def _lint_file(path, **options):
    report = api.lint([str(path)], **options)
    assert not report.problems and not report.internal
    return report.findings


# --------------------------------------------------------------------------- linked DeepSpeed files

def test_fp16_deepspeed_file_linked_from_a_bf16_config_is_a_mismatch(tmp_path):
    # transformers integrations/deepspeed.py: fill_match("fp16.enabled", args.fp16 or
    # args.fp16_full_eval) compares true with the default false and stops the launch
    (tmp_path / "zero3.json").write_text(json.dumps(
        {"fp16": {"enabled": True}, "zero_optimization": {"stage": 3,
                                                           "stage3_gather_16bit_weights_on_model_save": True}}))
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\nbf16: true\ndeepspeed: zero3.json\n")
    hits = [f for f in _lint_file(cfg) if f.rule == "deepspeed-file-contradicts-config"]
    assert [(f.key, f.severity, f.data["variant"]) for f in hits] == \
        [("deepspeed", Severity.ERROR, "precision-default")]
    assert hits[0].line == 4 and "fp16.enabled" in hits[0].message


def test_deepspeed_lr_is_compared_with_the_trainer_default(tmp_path):
    # TrainingArguments.learning_rate defaults to 5e-5 (transformers training_args.py)
    report = lint("model_name_or_path: acme/tiny-7b\nper_device_train_batch_size: 4\ndeepspeed:\n"
                  "  optimizer: {type: AdamW, params: {lr: 3.0e-5}}\n  zero_optimization: {stage: 2}\n")
    hits = _hits(report, "deepspeed-file-contradicts-config")
    assert [(f.key, f.data["value"], f.data["ds_value"]) for f in hits] == \
        [("deepspeed.optimizer.params.lr", 5e-5, 3e-5)]


def test_linked_zero3_file_without_gathering_points_at_the_link(tmp_path):
    (tmp_path / "z3.json").write_text(json.dumps({"zero_optimization": {"stage": 3}}))
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\ndeepspeed: z3.json\n")
    hits = [f for f in _lint_file(cfg) if f.rule == "zero3-save-without-gathered-weights"]
    assert [(f.key, f.severity, f.data["variant"]) for f in hits] == [("deepspeed", Severity.ERROR, "missing")]
    assert "z3.json" in hits[0].message


def test_missing_gradient_clipping_names_the_ignored_value():
    report = lint("model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\nmax_grad_norm: 0.3\n"
                  "deepspeed:\n  zero_optimization: {stage: 2}\n")
    hits = _hits(report, "deepspeed-file-replaces-trainer-setting")
    assert [(f.key, f.data["value"]) for f in hits] == [("max_grad_norm", 0.3)]
    # a file with gradient_clipping: the trainer fills or compares it; nothing replaced
    report = lint("model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\nmax_grad_norm: 0.3\n"
                  "deepspeed:\n  gradient_clipping: auto\n  zero_optimization: {stage: 2}\n")
    assert _hits(report, "deepspeed-file-replaces-trainer-setting") == []


# --------------------------------------------------------------------------- GRPO arithmetic

@pytest.mark.parametrize("per,acc,gpus,n,fires", [
    (3, 1, 2, 8, True),    # 3 x 1 x 2 = 6, not a multiple of 8 (TRL GRPOConfig.__post_init__)
    (4, 2, 1, 8, False),   # 4 x 2 x 1 = 8
    (2, 4, 4, 16, False),  # 2 x 4 x 4 = 32
    (6, 1, 4, 16, True),   # 24
])
def test_generation_batch_divisibility(per, acc, gpus, n, fires):
    report = lint(f"model_name_or_path: acme/tiny-7b\nper_device_train_batch_size: {per}\n"
                  f"gradient_accumulation_steps: {acc}\nnum_generations: {n}\n", gpus=gpus)
    hits = _hits(report, "rl-generation-batch-not-divisible")
    assert bool(hits) is fires
    if fires:
        assert hits[0].severity == Severity.ERROR and hits[0].data["total"] == per * acc * gpus


def test_unknown_process_count_is_a_warning_that_says_the_missing_factor():
    # 4 per device x 1 step = 4 per process; 8 generations need a multiple of 2 processes
    report = lint("model_name_or_path: acme/tiny-7b\nper_device_train_batch_size: 4\nnum_generations: 8\n")
    hits = _hits(report, "rl-generation-batch-not-divisible")
    assert [(f.severity, f.data["need"]) for f in hits] == [(Severity.WARNING, 2)]
    assert "not known" in hits[0].message


# --------------------------------------------------------------------------- trainers and keys

def test_trainer_family_is_guessed_from_keys_only_one_family_declares():
    # TRL: dataset_text_field and packing are SFTConfig fields; batch_size is PPOConfig's
    g = guess(["learning_rate", "dataset_text_field", "packing", "batch_size"])
    assert g.family == "SFT" and set(g.evidence) == {"dataset_text_field", "packing"}
    assert [k for k, _ in g.strangers] == ["batch_size"]
    # keys every TRL config inherits from TrainingArguments say nothing
    assert guess(["learning_rate", "num_train_epochs"]).family is None


def test_a_file_whose_keys_disagree_is_not_judged():
    report = lint("model_name_or_path: acme/tiny-7b\ndataset_text_field: text\nrpo_alpha: 1.0\n")
    assert _hits(report, "key-of-another-trainer") == []


# --------------------------------------------------------------------------- release pins

def test_exact_pins_are_read_and_ranges_are_not():
    assert pins.parse_requirement("TRL==0.12.2") == ("trl", "0.12.2")
    assert pins.parse_requirement("transformers[torch]==4.44.2  # pinned") == ("transformers", "4.44.2")
    assert pins.parse_requirement("peft>=0.10") is None
    assert pins.parse_requirement("-r base.txt") is None


def test_nearest_folder_wins_and_a_lock_file_wins_in_its_folder(tmp_path):
    (tmp_path / "pyproject.toml").write_text('[project]\nname = "x"\ndependencies = ["trl==0.9.6", "peft==0.10.0"]\n')
    sub = tmp_path / "recipes"
    sub.mkdir()
    (sub / "requirements.txt").write_text("trl==0.12.2\ntransformers==4.44.2\n")
    (sub / "uv.lock").write_text('version = 1\n[[package]]\nname = "transformers"\nversion = "4.46.3"\n')
    cfg = sub / "sft.yaml"
    cfg.write_text("learning_rate: 1.0e-5\n")
    found = {lib: (p.version, p.source.rsplit("/", 1)[-1]) for lib, p in pins.pins_near(str(cfg)).items()}
    assert found == {"trl": ("0.12.2", "requirements.txt"), "transformers": ("4.46.3", "uv.lock"),
                     "peft": ("0.10.0", "pyproject.toml")}


def test_text_without_a_file_reads_no_pins():
    assert pins.pins_near("<text>") == {} and pins.pins_near("not-here/example.yaml") == {}


def test_a_key_the_pinned_release_refuses_is_an_error_at_its_line(tmp_path):
    # known_keys.json: evaluation_strategy accepted by transformers 4.36-4.50, absent from 4.51
    (tmp_path / "requirements.txt").write_text("transformers==4.57.1\n")
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n")
    hits = [f for f in _lint_file(cfg) if f.rule == "key-not-in-release"]
    assert [(f.key, f.severity, f.line, f.column) for f in hits] == \
        [("evaluation_strategy", Severity.ERROR, 2, 1)]
    assert "pinned in" in hits[0].message and "requirements.txt" in hits[0].message and "4.57.1" in hits[0].message
    # the same key on a release that has it: nothing
    (tmp_path / "requirements.txt").write_text("transformers==4.44.2\n")
    pins._folder_pins.cache_clear()
    assert [f for f in _lint_file(cfg) if f.rule == "key-not-in-release"] == []


def test_installed_wins_over_the_pins_and_between_releases_is_a_warning(tmp_path):
    (tmp_path / "requirements.txt").write_text("transformers==4.44.2\n")
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n")
    pins._folder_pins.cache_clear()
    # 4.50 is the last scanned release with the key and 4.51 the first without: 4.50.9 has it
    assert [f for f in _lint_file(cfg, installed=["transformers==4.50.9"])
            if f.rule == "key-not-in-release"] == []
    hits = [f for f in _lint_file(cfg, installed=["transformers==5.0.0"]) if f.rule == "key-not-in-release"]
    assert [(f.severity, f.data["variant"]) for f in hits] == [(Severity.ERROR, "refused")]


def test_a_bad_installed_value_is_a_clear_error():
    with pytest.raises(ValueError, match="LIBRARY==VERSION"):
        pins.parse_installed(["trl"])
    with pytest.raises(ValueError, match="expected one of"):
        pins.parse_installed(["numpy==1.26.0"])
    assert pins.parse_installed(["TRL==0.12.2"]) == {"trl": "0.12.2"}


def test_cli_rejects_a_bad_installed_value_with_exit_2(tmp_path):
    from typer.testing import CliRunner

    from cfgcheck.cli import app

    cfg = tmp_path / "train.yaml"
    cfg.write_text("learning_rate: 1.0e-5\n")
    result = CliRunner().invoke(app, ["lint", str(cfg), "--no-project", "--installed", "trl"])
    assert result.exit_code == 2 and "LIBRARY==VERSION" in result.output


def test_unknown_key_leaves_renamed_keys_to_the_release_rule():
    report = lint("model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n")
    rules = sorted(f.rule for f in report.findings if f.key == "evaluation_strategy")
    assert rules == ["key-not-in-release"]
    alone = lint("model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n",
                 skip=["key-not-in-release"])
    assert [f.severity for f in alone.findings if f.key == "evaluation_strategy"] == [Severity.INFO]


# --------------------------------------------------------------------------- certainty

def test_device_map_under_ddp_needs_a_known_process_count():
    text = "model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\ndevice_map: auto\n"
    assert _hits(lint(text), "device-map-under-distributed-run") == []
    hits = _hits(lint(text, gpus=8), "device-map-under-distributed-run")
    assert [(f.severity, f.data["gpus"]) for f in hits] == [(Severity.ERROR, 8)]


def test_qlora_merge_is_an_error_only_where_the_runner_refuses_it():
    trainer = ("model_name_or_path: acme/tiny-7b\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
               "load_in_4bit: true\n")
    # the trainer layout names no merge key: the rule is silent; axolotl's validator refuses
    assert _hits(lint(trainer), "merge-into-quantised-base") == []
    axolotl = ("base_model: acme/tiny-7b\nadapter: qlora\nmicro_batch_size: 2\nsequence_len: 1024\n"
               "sample_packing: true\nload_in_4bit: true\nlora_r: 16\nlora_alpha: 32\nmerge_lora: true\n")
    hits = _hits(lint(axolotl), "merge-into-quantised-base")
    assert [(f.severity, f.data["variant"]) for f in hits] == [(Severity.ERROR, "refused")]
    assert "Can't merge qlora if loaded in 4bit" in hits[0].message


def test_accelerate_bf16_launch_with_an_fp16_deepspeed_file_is_refused(tmp_path):
    # accelerate DeepSpeedPlugin.set_mixed_precision: "--mixed_precision arg cannot be set to
    # bf16 when fp16 is set in the DeepSpeed config file"
    (tmp_path / "ds.json").write_text(json.dumps({"fp16": {"enabled": True}, "zero_optimization": {"stage": 2}}))
    launch = tmp_path / "launch.yaml"
    launch.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nmixed_precision: bf16\n"
                      "num_processes: 8\nmachine_rank: 0\ndeepspeed_config:\n  deepspeed_config_file: ds.json\n")
    hits = [f for f in _lint_file(launch) if f.rule == "deepspeed-file-contradicts-config"]
    assert [(f.key, f.severity, f.data["variant"]) for f in hits] == \
        [("mixed_precision", Severity.ERROR, "launcher-precision")]
    (tmp_path / "ds.json").write_text(json.dumps({"fp16": {"enabled": "auto"}, "zero_optimization": {"stage": 2}}))
    assert [f for f in _lint_file(launch) if f.rule == "deepspeed-file-contradicts-config"] == []


def test_a_launcher_linking_a_zero3_file_is_a_warning_that_says_the_assumption(tmp_path):
    # the launch file does not name the trainer or the method: saving a full model is assumed
    (tmp_path / "z3.json").write_text(json.dumps({"zero_optimization": {"stage": 3}}))
    launch = tmp_path / "launch.yaml"
    launch.write_text("compute_environment: LOCAL_MACHINE\ndistributed_type: DEEPSPEED\nnum_processes: 8\n"
                      "machine_rank: 0\ndeepspeed_config:\n  deepspeed_config_file: z3.json\n")
    hits = [f for f in _lint_file(launch) if f.rule == "zero3-save-without-gathered-weights"]
    assert [(f.key, f.severity) for f in hits] == [("deepspeed_config.deepspeed_config_file", Severity.WARNING)]
    assert "assumed" in hits[0].message


def test_project_file_states_the_installed_release(tmp_path):
    from cfgcheck import project as projectmod

    (tmp_path / "cfgcheck.yaml").write_text("installed:\n  transformers: \"4.57.1\"\n")
    cfg = tmp_path / "train.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n")
    proj = projectmod.load(tmp_path / "cfgcheck.yaml")
    report = api.lint([str(cfg)], project=proj)
    hits = [f for f in report.findings if f.rule == "key-not-in-release"]
    assert [(f.severity, f.data["version"]) for f in hits] == [(Severity.ERROR, "4.57.1")]
    # the command line wins over the project file
    report = api.lint([str(cfg)], project=proj, installed=["transformers==4.44.2"])
    assert [f for f in report.findings if f.rule == "key-not-in-release"] == []


def test_project_file_rejects_an_unknown_library(tmp_path):
    from cfgcheck import project as projectmod

    (tmp_path / "cfgcheck.yaml").write_text("installed:\n  numpy: \"1.26.0\"\n")
    with pytest.raises(projectmod.ProjectError) as err:
        projectmod.load(tmp_path / "cfgcheck.yaml")
    assert "cfgcheck.yaml:2:" in str(err.value) and "numpy" in str(err.value) and "trl" in str(err.value)


def test_broken_pin_files_are_passed_over(tmp_path):
    # not the config: garbage, deep nesting, binary bytes and a folder named like a pin file
    (tmp_path / "pyproject.toml").write_text("[project\n" + "a = [" * 5000 + "\n")
    (tmp_path / "uv.lock").write_bytes(b"\xff\xfe\x00garbage\x00")
    (tmp_path / "requirements-dev.txt").mkdir()
    (tmp_path / "requirements.txt").write_text("trl==0.12.2\n\x00\x01 nonsense ==\n")
    cfg = tmp_path / "sft.yaml"
    cfg.write_text("learning_rate: 1.0e-5\n")
    pins._folder_pins.cache_clear()
    assert {lib: p.version for lib, p in pins.pins_near(str(cfg)).items()} == {"trl": "0.12.2"}
    assert _lint_file(cfg) is not None


def test_the_versions_pinned_near_a_config_are_its_pins_in_words(tmp_path):
    # key-not-in-release reads the folder's pins as (version, where), one read-only mapping per
    # folder in a run: the same pins, in the same order, as pins_near finds for each config
    from cfgcheck.memo import scope

    (tmp_path / "pyproject.toml").write_text('[project]\nname = "x"\ndependencies = ["trl==0.9.6", "peft==0.10.0"]\n')
    sub = tmp_path / "recipes"
    sub.mkdir()
    (sub / "requirements.txt").write_text("trl==0.12.2\ntransformers==4.44.2\n")
    first, second = sub / "a.yaml", sub / "b.yaml"
    for cfg in (first, second):
        cfg.write_text("learning_rate: 1.0e-5\n")
    link = tmp_path / "link.yaml"
    link.symlink_to(first)
    for kept in (False, True):
        with scope() if kept else contextlib.nullcontext():
            for cfg in (first, second, link):
                expected = [(lib, (p.version, f"pinned in {p.source}")) for lib, p in pins.pins_near(str(cfg)).items()]
                got = pins.pinned_versions_near(str(cfg))
                assert list(got.items()) == expected and expected
                with pytest.raises(TypeError):
                    got["trl"] = ("1", "x")  # shared by the folder's configs: never changed
    assert dict(pins.pinned_versions_near("<text>")) == {} == dict(pins.pinned_versions_near("not-here/x.yaml"))


@pytest.mark.skipif(not hasattr(os, "symlink"), reason="no symbolic links here")
def test_a_linked_config_is_judged_by_the_pins_beside_its_target_whatever_the_run_read_first(tmp_path):
    """The read of a config says whether it is a link; the rules that look its pins up later
    in the run take that answer (pins.file_kind), so a link is still judged by the folder it
    points into, and a copy by its own."""
    (tmp_path / ".git").mkdir()
    here, there = tmp_path / "b", tmp_path / "a"
    here.mkdir()
    there.mkdir()
    text = ("model_name_or_path: mistralai/Mistral-7B-v0.1\noutput_dir: out/x\nlearning_rate: 1.0e-4\n"
            "per_device_train_batch_size: 2\nnum_train_epochs: 3\nmax_seq_length: 1024\n")
    (there / "train.yaml").write_text(text)
    # max_seq_length: accepted by trl 0.9-0.19, gone in 0.20 (the bundled key table, generated
    # from TRL's released SFTConfig classes)
    (there / "requirements.txt").write_text("trl==1.16.0\n")
    (here / "requirements.txt").write_text("trl==0.12.0\n")  # still accepted there
    (here / "own.yaml").write_text(text)
    (here / "link.yaml").symlink_to(there / "train.yaml")
    for order in (["link.yaml", "own.yaml"], ["own.yaml", "link.yaml"]):
        files = [str(here / n) for n in order] + [str(there / "train.yaml")]
        report = api.lint(files, project=None)
        refused = {os.path.basename(f.file): f.data.get("where") for f in report.findings
                   if f.rule == "key-not-in-release" and f.key == "max_seq_length"}
        assert refused == {"link.yaml": f"pinned in {there / 'requirements.txt'}",
                           "train.yaml": f"pinned in {there / 'requirements.txt'}"}, refused
