"""A launch script's arguments override the config it starts, the way the config's reader applies
them; each finding is located in the file that set the value, and reported once.

Scripts and configs are invented (the Quillmoor and Harrowgate teams' runs). The readers'
behaviour is taken from their sources: LLaMA-Factory 0.9.5 hparams/parser.py read_args
(OmegaConf.from_cli over the YAML), torchtune 0.6.1 recipe parser (OmegaConf.from_dotlist over the
file), axolotl 0.19.0 cli/config.py load_cfg (CLI keywords over the file, ``a__b`` nested), TRL's
TrlParser (the file as defaults, the command line wins).
"""

from __future__ import annotations

from cfgcheck import api, engine
from cfgcheck.scripts import overrides_of, parse_script

FULL_7B = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
           "per_device_train_batch_size: 4\nnum_train_epochs: 1\n")
LF_FULL = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nstage: sft\ndo_train: true\n"
           "finetuning_type: full\nlearning_rate: 2.0e-5\ncutoff_len: 2048\ntemplate: llama2\n"
           "per_device_train_batch_size: 2\n")
LR_RULE = "full-finetune-lr-too-high"


def _loud(report, rule=LR_RULE):
    return [f for f in report.findings if f.rule == rule and f.severity.word != "info"]


def test_accelerate_script_arguments_override_the_config_and_point_at_the_script(tmp_path):
    (tmp_path / "run.yaml").write_text(FULL_7B)
    script = tmp_path / "go.sh"
    script.write_text("LR=1e-4\naccelerate launch --num_processes 2 train.py run.yaml \\\n  --learning_rate $LR\n")
    quiet = api.lint([str(tmp_path / "run.yaml")], project=None)
    assert not _loud(quiet)  # 2e-5 as written is fine for a 7B full fine-tune
    report = api.lint([str(tmp_path)], project=None)
    (hit,) = _loud(report)  # once, in the script's report, not again in the config's
    assert hit.file == str(script) and (hit.line, hit.column) == (3, 19)
    assert "learning_rate 0.0001" in hit.message  # the script's value, not the config's 2e-5
    assert hit.data["overrides"] == "go.sh:3 overrides run.yaml:2"


def test_the_config_report_keeps_findings_on_its_own_values(tmp_path):
    # the schedule problem is in the config; the script only changes the learning rate
    (tmp_path / "run.yaml").write_text(FULL_7B + "lr_scheduler_type: constant\nwarmup_steps: 100\n")
    (tmp_path / "go.sh").write_text("python train.py run.yaml --learning_rate 1e-5\n")
    report = api.lint([str(tmp_path)], project=None)
    hits = [f for f in report.findings if f.rule == "constant-schedule-ignores-warmup"]
    assert len(hits) == 1 and hits[0].file == str(tmp_path / "run.yaml")
    assert not _loud(report)  # 1e-5 from the script is below the ceiling


def test_llama_factory_reads_key_value_words_not_flags(tmp_path):
    (tmp_path / "lf.yaml").write_text(LF_FULL)
    script = tmp_path / "lf.sh"
    script.write_text("llamafactory-cli train lf.yaml learning_rate=2e-4 --warmup_steps 9\n")
    (sl,) = parse_script(script.read_text(), str(script))
    assert [(p, a.text) for p, a, _word in overrides_of(sl)] == [(("learning_rate",), "2e-4")]
    (hit,) = _loud(api.lint([str(tmp_path)], project=None))
    assert hit.file == str(script) and hit.line == 1
    assert hit.data["overrides"] == "lf.sh:1 overrides lf.yaml:5"


def test_torchtune_dotlist_sets_nested_keys(tmp_path):
    script = tmp_path / "tt.sh"
    script.write_text("tune run full_finetune_distributed --config tt.yaml optimizer.lr=3e-4 batch_size=8\n")
    (tmp_path / "tt.yaml").write_text("optimizer:\n  _component_: torch.optim.AdamW\n  lr: 2.0e-5\n")
    (sl,) = parse_script(script.read_text(), str(script))
    assert [(p, a.text) for p, a, _word in overrides_of(sl)] == [(("optimizer", "lr"), "3e-4"), (("batch_size",), "8")]
    from cfgcheck.compose import compose, override_value
    from cfgcheck.load import load_text
    from cfgcheck.scripts import override_document

    doc = compose(load_text((tmp_path / "tt.yaml").read_text(), str(tmp_path / "tt.yaml"))[0],
                  str(tmp_path / "tt.yaml"), located=override_document(sl, override_value))
    # OmegaConf's dotlist reads each value as a YAML scalar (1e-4 as a float, as Hydra's grammar does)
    assert doc.data["optimizer"] == {"_component_": "torch.optim.AdamW", "lr": 3e-4}
    assert doc.data["batch_size"] == 8
    assert doc.origins[("optimizer", "lr")] == str(script)
    assert doc.entries[("optimizer", "lr")].value.line == 1
    assert doc.origins[("optimizer", "_component_")] == str(tmp_path / "tt.yaml")


def test_axolotl_keywords_override_and_double_underscore_nests(tmp_path):
    script = tmp_path / "ax.sh"
    script.write_text("axolotl train ax.yml --learning_rate 5e-4 --trl__beta 0.2 lr_scheduler=cosine\n")
    (tmp_path / "ax.yml").write_text("base_model: acme/base-3b\n")
    (sl,) = parse_script(script.read_text(), str(script))
    # axolotl's CLI takes --key value keywords; a bare key=value word is not one of them
    assert [(p, a.value) for p, a, _word in overrides_of(sl)] == [(("learning_rate",), 5e-4), (("trl", "beta"), 0.2)]


def test_trl_cli_flags_override_its_config(tmp_path):
    script = tmp_path / "trl.sh"
    script.write_text("trl sft --config sft.yaml --learning_rate 1e-4\n")
    (tmp_path / "sft.yaml").write_text(FULL_7B)
    (sl,) = parse_script(script.read_text(), str(script))
    assert sl.configs == (str(tmp_path / "sft.yaml"),)
    (hit,) = _loud(api.lint([str(tmp_path)], project=None))
    assert hit.file == str(script)


def test_the_script_alone_reports_the_overridden_run(tmp_path):
    (tmp_path / "run.yaml").write_text(FULL_7B)
    script = tmp_path / "go.sh"
    script.write_text("torchrun --nproc_per_node 4 train.py run.yaml --learning_rate 1e-4\n")
    report = engine.lint_file(script)
    assert [f.file for f in _loud(report)] == [str(script)]


def test_fix_never_edits_the_config_for_a_value_the_script_sets(tmp_path):
    config = tmp_path / "run.yaml"
    config.write_text(FULL_7B)
    (tmp_path / "go.sh").write_text("python train.py run.yaml --learning_rate 1e-4\n")
    api.fix([str(tmp_path)], project=None, training=True)
    assert config.read_text() == FULL_7B


def test_a_launch_with_no_config_still_lints_its_arguments_flat(tmp_path):
    script = tmp_path / "flat.sh"
    script.write_text("python train.py --model_name_or_path meta-llama/Llama-2-7b-hf --learning_rate 5e-3\n")
    (hit,) = _loud(api.lint([str(script)], project=None))
    assert hit.file == str(script) and "overrides" not in hit.data


def test_axolotl_own_options_are_not_settings_and_no_flags_set_false(tmp_path):
    script = tmp_path / "ax.sh"
    # axolotl 0.19.0 cli/main.py: --launcher and --sweep are the train command's own options;
    # cli/utils/args.py: a boolean field k gets --k/--no-k, a nested field --parent.field
    script.write_text("axolotl train ax.yml --launcher torchrun --no-flash-attention --trl.beta 0.2\n")
    (tmp_path / "ax.yml").write_text("base_model: acme/base-3b\n")
    (sl,) = parse_script(script.read_text(), str(script))
    assert [(p, a.value) for p, a, _word in overrides_of(sl)] == [(("flash_attention",), False),
                                                                 (("trl", "beta"), 0.2)]


def test_a_launch_with_several_configs_overrides_none(tmp_path):
    script = tmp_path / "two.sh"
    script.write_text("python train.py model.yaml data.yaml --learning_rate 1e-4\n")
    (sl,) = parse_script(script.read_text(), str(script))
    assert overrides_of(sl) == []


def test_derive_opens_the_same_composed_run(tmp_path):
    # derive opens runs on the one open path (cfgcheck.run): the script's value is the run's
    (tmp_path / "run.yaml").write_text(FULL_7B)
    (tmp_path / "go.sh").write_text("python train.py run.yaml --learning_rate 1e-4 --per_device_train_batch_size 8\n")
    result = api.derive([str(tmp_path)], project=None)
    ((file, plan),) = result.runs
    assert file == str(tmp_path / "run.yaml")
    assert plan.learning_rate == 1e-4 and plan.schedule.per_device == 8
    alone = api.derive([str(tmp_path / "run.yaml")], project=None)
    assert alone.runs[0][1].learning_rate == 2e-5  # without the script: the config as written
