"""Misspelt keys in every section and in the recipe runners' files; safe suggestions only.

Configs are invented (our own organisations and tasks).
"""

from __future__ import annotations

from cfgcheck import engine
from cfgcheck.knowledge import keys


def _unknown(text: str, name: str = "run.yaml", **kw) -> dict[str, tuple[str, str | None]]:
    report = engine.lint_text(text, name) if not kw else engine.lint_file(kw["path"])
    assert report.problem is None and not report.internal
    return {f.key: (f.severity.word, f.data.get("suggestion")) for f in report.findings if f.rule == "unknown-key"}


def test_typos_inside_trainer_sections_are_caught():
    text = ("model_name_or_path: acme/tiny-1b\ntraining:\n  learning_rat: 2.0e-5\n"
            "  gradient_accumulation_step: 4\n  num_epoch: 3\nlora:\n  lora_alpah: 32\n  r: 8\n")
    found = _unknown(text)
    assert found["training.learning_rat"] == ("warning", "learning_rate")
    assert found["training.gradient_accumulation_step"] == ("warning", "gradient_accumulation_steps")
    assert found["training.num_epoch"] == ("warning", "num_epochs")  # the section's own name
    assert found["lora.lora_alpah"] == ("warning", "lora_alpha")


def test_a_section_key_written_without_its_prefix_gets_the_short_suggestion():
    found = _unknown("model_name_or_path: acme/tiny-1b\nlora:\n  r: 8\n  alpah: 16\n")
    assert found["lora.alpah"] == ("warning", "alpha")


def test_an_authors_own_section_key_is_not_called_a_typo():
    found = _unknown("model_name_or_path: acme/tiny-1b\ntraining:\n  fjord_curriculum: linear\n  learning_rate: 1.0e-5\n")
    assert "training.fjord_curriculum" not in found


def test_axolotl_typos_are_caught():
    text = ("base_model: acme/tiny-7b\nadapter: lora\nmicro_batch_size: 2\nsequence_len: 1024\n"
            "sample_packing: true\nlora_r: 16\nlora_alpah: 32\nnum_epoch: 2\n")
    found = _unknown(text)
    assert found["lora_alpah"] == ("warning", "lora_alpha")
    assert found["num_epoch"] == ("warning", "num_epochs")


def test_llama_factory_typos_are_caught():
    text = ("model_name_or_path: acme/tiny-7b\nstage: sft\nfinetuning_type: lora\nlora_target: all\n"
            "cutoff_len: 1024\ntemplate: qwen\nlora_rnak: 8\ngradient_accumulation_step: 4\n")
    found = _unknown(text)
    assert found["lora_rnak"] == ("warning", "lora_rank")
    assert found["gradient_accumulation_step"] == ("warning", "gradient_accumulation_steps")


TORCHTUNE = """\
model:
  _component_: torchtune.models.llama2.lora_llama2_7b
  lora_attn_modules: [q_proj, v_proj]
  lora_rank: 8
  lora_alpah: 16
checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
  checkpoint_dir: /tmp/acme-llama2
  checkpoint_files: [model.safetensors]
  model_type: LLAMA2
  output_dir: /tmp/out
optimizer:
  _component_: torch.optim.AdamW
  lr: 3.0e-4
  fused_kernels: true
enable_activation_checkpointing: true
max_steps_per_epoch: null
log_every_n_steps: 1
batch_size: 2
epoch: 1
"""


def test_torchtune_component_arguments_and_recipe_keys():
    found = _unknown(TORCHTUNE)
    # torchtune 0.6.1 models/llama2/_model_builders.py lora_llama2_7b(lora_alpha=...)
    assert found["model.lora_alpah"] == ("warning", "lora_alpha")
    assert found["epoch"] == ("warning", "epochs")
    # torch.optim.AdamW's parameters (torch 2.13.0 optim/adamw.py, the pinned torch) have no
    # fused_kernels: instantiating the optimizer raises on it
    assert found["optimizer.fused_kernels"][0] == "warning"
    assert "model.lora_rank" not in found and "checkpointer.model_type" not in found


def test_a_component_argument_nothing_is_close_to_is_an_error_of_instantiation():
    text = TORCHTUNE.replace("  lora_alpah: 16\n", "  flavour_of_fjord: 16\n")
    report = engine.lint_text(text, "run.yaml")
    hits = [f for f in report.findings if f.rule == "unknown-key" and f.key == "model.flavour_of_fjord"]
    assert hits and hits[0].severity.word == "warning"
    assert "torchtune.models.llama2.lora_llama2_7b" in hits[0].message


def test_suggestions_never_turn_one_valid_setting_into_another():
    # lora_rank is LLaMA-Factory's rank (and what the trainer layout reads), local_rank is the
    # distributed rank; max_train_samples (transformers' example scripts) is no typo of
    # max_train_examples; min_lr is not min_p (a sampling setting)
    text = ("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nlora_rank: 8\n"
            "max_train_samples: 1000\nmin_lr: 1.0e-6\n")
    found = _unknown(text)
    assert all(sev == "info" and near is None for sev, near in found.values()), found


def test_slip_of_keyboard_is_word_by_word():
    from cfgcheck.checks.unknown_keys import slip_of_keyboard

    assert slip_of_keyboard("lora_alpah", "lora_alpha")
    assert slip_of_keyboard("per_device_train_batchsize", "per_device_train_batch_size")
    assert slip_of_keyboard("gradient_accumulation_step", "gradient_accumulation_steps")
    assert not slip_of_keyboard("lora_rank", "local_rank")
    assert not slip_of_keyboard("min_lr", "min_p")
    assert not slip_of_keyboard("max_train_samples", "max_train_examples")


def test_keys_the_repositorys_scripts_declare_are_known(tmp_path):
    (tmp_path / "pyproject.toml").write_text("[project]\nname = 'fjord-tuner'\n")
    (tmp_path / "src").mkdir()
    (tmp_path / "src" / "args.py").write_text(
        "from dataclasses import dataclass, field\n\n@dataclass\nclass FjordArguments:\n"
        "    lora_rnk_schedule: str = 'flat'\n    curriculum_stages: int = field(default=3)\n"
    )
    (tmp_path / "train.py").write_text(
        "import argparse\np = argparse.ArgumentParser()\np.add_argument('--warmup-fraction', type=float)\n"
        "p.add_argument('-s', '--seed-offset', dest='seed_shift')\n"
    )
    cfg = tmp_path / "configs" / "run.yaml"
    cfg.parent.mkdir()
    cfg.write_text("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\nlora_rnk_schedule: flat\n"
                   "curriculum_stages: 2\nwarmup_fraction: 0.1\nseed_shift: 3\nlearnig_rate_x: 1\n")
    found = _unknown("", path=cfg)
    assert set(found) == {"learnig_rate_x"}


def test_the_scripts_are_read_never_run(tmp_path):
    from cfgcheck.knowledge.repo_keys import keys_of_source

    marker = tmp_path / "ran"
    source = f"open({str(marker)!r}, 'w').write('x')\nimport argparse\nargparse.ArgumentParser().add_argument('--fjord-depth')\n"
    assert set(keys_of_source(source)) == {"fjord_depth"}
    assert not marker.exists()
    assert keys_of_source("def broken(:\n") == {}


def test_suggestion_search_is_bounded_and_gives_the_same_suggestions():
    # 300 near misses: known trainer keys with their last letter dropped
    known = sorted(k for k in keys._data()["infos"]["trainer"] if len(k) > 8 and "." not in k)
    typos = sorted({k[:-1] for k in known} - set(known))[:300]
    lines = ["model_name_or_path: acme/tiny-1b", "learning_rate: 2.0e-5"]
    lines += [f"{t}: 1" for t in typos]
    report = engine.lint_text("\n".join(lines) + "\n", "run.yaml")
    hits = [f for f in report.findings if f.rule == "unknown-key"]
    assert len(hits) == 300
    limit = 200  # rules/unknown-key.yaml suggestion_limit
    searched = [f for f in hits if f.data.get("limit") is None]
    assert len(searched) == limit
    for f in searched:
        assert f.data.get("suggestion") == keys.suggest(f.key)
    assert sum(1 for f in searched if f.data.get("suggestion")) > limit // 2
    past = [f for f in hits if f.data.get("limit") == limit]
    assert len(past) == 100 and all(f.severity.word == "info" for f in past)


def _repo(tmp_path, script: str):
    (tmp_path / "setup.py").write_text("from setuptools import setup\nsetup(name='fjord')\n")
    (tmp_path / "train.py").write_text(script)
    cfg = tmp_path / "run.yaml"
    cfg.write_text("model_name_or_path: acme/tiny-1b\nlearning_rate: 2e-5\nper_device_train_batch_size: 4\n")
    report = engine.lint_file(cfg)
    return [f for f in report.findings if f.rule == "yaml-version-dependent-value"]


def test_a_repository_that_loads_configs_with_omegaconf_makes_the_exponent_harmless(tmp_path):
    hits = _repo(tmp_path, "from omegaconf import OmegaConf\ncfg = OmegaConf.load('run.yaml')\n")
    assert hits and hits[0].severity.word == "info" and "OmegaConf" in hits[0].message


def test_a_repository_that_passes_values_as_command_line_text_makes_the_exponent_harmless(tmp_path):
    script = ("import yaml, subprocess\ncfg = yaml.safe_load(open('run.yaml'))\nargs = []\n"
              "for k, v in cfg.items():\n    args += [f'--{k}', str(v)]\nsubprocess.run(['python', 'sft.py', *args])\n")
    hits = _repo(tmp_path, script)
    assert hits and hits[0].severity.word == "info" and "command-line" in hits[0].message


def test_a_repository_that_reads_yaml_types_keeps_the_warning(tmp_path):
    hits = _repo(tmp_path, "import yaml\ncfg = yaml.safe_load(open('run.yaml'))\nlr = cfg['learning_rate'] * 2\n")
    assert hits and hits[0].severity.word == "warning"


def test_the_repository_scan_is_bounded(tmp_path, monkeypatch):
    from cfgcheck.knowledge import repo_keys

    (tmp_path / ".git").mkdir()
    for i in range(5):
        (tmp_path / f"m{i}.py").write_text(f"import argparse\nargparse.ArgumentParser().add_argument('--opt-{i}')\n")
    (tmp_path / "run.yaml").write_text("learning_rate: 2.0e-5\n")
    monkeypatch.setattr(repo_keys, "MAX_FILES", 2)
    repo_keys._scan.cache_clear()
    found = repo_keys.repo_keys(tmp_path / "run.yaml")
    assert found.files == 2 and found.keys == {"opt_0", "opt_1"}
    repo_keys._scan.cache_clear()
    # no repository marker above a config: nothing is scanned
    lone = tmp_path.parent / f"{tmp_path.name}-lone"
    lone.mkdir()
    (lone / "run.yaml").write_text("learning_rate: 2.0e-5\n")
    assert repo_keys.repository_root(lone / "run.yaml") is None
    assert repo_keys.repo_keys(lone / "run.yaml") is None
