"""Known-key lists: lookups, version ranges and typo suggestions (no reference library needed)."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
import yaml

from cfgcheck.knowledge import keys
from cfgcheck.knowledge.keys import KeyInfo, layouts, lookup, suggest

REPO = Path(__file__).resolve().parents[1]
KNOWLEDGE = REPO / "cfgcheck" / "knowledge"
SHARED = Path(__file__).resolve().parents[1].parent / "shared"
CORPUS = SHARED / "corpus" / "public"


def _version(v: str) -> tuple[int, ...]:
    return tuple(int(p) for p in v.split("."))


def test_layouts_are_the_library_kinds_and_the_recipe_runners():
    assert layouts() == ("accelerate", "axolotl", "deepspeed", "llama-factory", "llama-factory-v1",
                         "peft-adapter", "torchtune", "trainer")


def test_unknown_layout_is_a_clear_error():
    with pytest.raises(ValueError, match="unknown layout 'peft-bench'"):
        lookup("learning_rate", "peft-bench")


def test_trainer_keys_are_found_with_owner_and_range():
    # REFERENCES.md §9: learning_rate default 5e-5 in both HF-4 (4.57.6) and HF-5 (5.24.0) [V].
    info = lookup("learning_rate")
    assert isinstance(info, KeyInfo)
    assert info.layout == "trainer"
    assert "transformers.TrainingArguments" in info.owners
    first, last = info.accepted["transformers"]
    assert _version(first) <= (4, 57) and _version(last) >= (5, 24)
    assert info.current is True
    # REFERENCES.md §9: gradient_accumulation_steps, max_steps, lr_scheduler_type are TrainingArguments fields [V].
    for name in ("gradient_accumulation_steps", "max_steps", "lr_scheduler_type", "save_steps", "eval_steps"):
        assert lookup(name) is not None, name


def test_flat_lora_names_of_trl_model_config_are_trainer_keys():
    # TRL ModelConfig declares lora_r / lora_alpha / ... (trl 0.9.6 and 1.16.0 trainer/model_config.py, scanned).
    for name in ("lora_r", "lora_alpha", "lora_dropout", "lora_target_modules", "lora_modules_to_save", "use_peft"):
        info = lookup(name)
        assert info is not None and "trl.ModelConfig" in info.owners, name
        assert info.current


def test_trl_script_arguments_and_cli_env_block_are_known():
    # TRL ScriptArguments.dataset_name; TrlParser pops an `env` mapping (trl 1.16.0 scripts/utils.py, scanned).
    assert "trl.ScriptArguments" in lookup("dataset_name").owners
    assert lookup("env").owners  # owned by the TRL YAML parser
    assert lookup("env").accepted["trl"]


def test_peft_adapter_and_deepspeed_and_accelerate_keys():
    # REFERENCES.md §5 (PEFT LoraConfig): r, lora_alpha, target_modules, use_rslora [V].
    for name in ("r", "lora_alpha", "target_modules", "use_rslora", "peft_type", "task_type"):
        assert lookup(name, "peft-adapter") is not None, name
    assert "peft.LoraConfig" in lookup("r", "peft-adapter").owners
    # REFERENCES.md §10: train_batch_size, train_micro_batch_size_per_gpu, gradient_accumulation_steps,
    # gradient_clipping, zero_optimization.stage, fp16.loss_scale, fp16.initial_scale_power [V DS page].
    for name in (
        "train_batch_size",
        "train_micro_batch_size_per_gpu",
        "gradient_accumulation_steps",
        "gradient_clipping",
        "zero_optimization.stage",
        "fp16.loss_scale",
        "fp16.initial_scale_power",
        "bf16.enabled",
        "bfloat16",  # REFERENCES.md §10: the legacy key "bfloat16" is also read [V]
        "zero_optimization.stage3_prefetch_bucket_size",  # §10 table (HF fills it) [V]
    ):
        assert lookup(name, "deepspeed") is not None, name
    # accelerate ClusterConfig fields (accelerate 1.15.0 commands/config/config_args.py, scanned).
    for name in ("distributed_type", "mixed_precision", "num_processes", "fsdp_config", "fsdp_config.fsdp_version"):
        assert lookup(name, "accelerate") is not None, name


def test_typos_get_the_intended_key():
    assert suggest("lora_aplha") == "lora_alpha"
    assert suggest("learnig_rate") == "learning_rate"
    assert suggest("per_device_train_batchsize") == "per_device_train_batch_size"
    assert suggest("lora_alpah", "peft-adapter") == "lora_alpha"
    assert suggest("zero_optimization.stag", "deepspeed") == "zero_optimization.stage"
    assert suggest("zero_optimisation.stage", "deepspeed") == "zero_optimization.stage"


def test_case_and_stray_spaces_are_forgiven_by_suggest_not_by_lookup():
    assert lookup("Learning_Rate") is None
    assert suggest("Learning_Rate") == "learning_rate"
    assert lookup("gradient_accumulation_steps ") is None
    assert suggest("gradient_accumulation_steps ") == "gradient_accumulation_steps"
    # The trailing-space key really occurs in a public DeepSpeed config (corpus README "Known oddities").
    assert suggest("gradient_accumulation_steps ", "deepspeed") == "gradient_accumulation_steps"


def test_known_keys_never_get_a_suggestion():
    for layout in layouts():
        table = keys._data()["infos"][layout]
        for name in list(table)[:: max(1, len(table) // 60)]:
            assert suggest(name, layout) is None, (layout, name)
    # Old but real names are known too, so they are not typos.
    assert suggest("warmup_ratio") is None
    assert suggest("evaluation_strategy") is None


def test_non_string_yaml_keys_are_unknown_without_error():
    # PyYAML reads a bare `on:` key as True (REFERENCES.md §11, YAML 1.1 bool type and PyYAML resolver) [V];
    # `1:` is an int and `~:` is null (YAML integer/null types, from memory).
    for key in (True, 1, None, (1, 2)):
        assert lookup(key) is None
        assert suggest(key) is None


def test_nothing_close_means_no_suggestion():
    assert suggest("fjordline_support_bot_flavour") is None
    assert suggest("") is None
    assert suggest("xq") is None


def test_warmup_ratio_is_known_but_not_accepted_by_transformers_5_24():
    # REFERENCES.md §9: "HF-5 removed warmup_ratio" (HF-5 = 5.24.0) [V]; HF-4 (4.57.6) validates it [V].
    info = lookup("warmup_ratio")
    assert info is not None
    first, last = info.accepted["transformers"]
    assert _version(first) <= (4, 57, 6) <= _version(last)
    assert _version(last) < (5, 24, 0)
    assert info.current is False
    text = info.versions_text()
    assert text.startswith("transformers 4.")
    assert "removed in 5." in text
    # Its replacement, warmup_steps, is current (REFERENCES.md §9: HF-5 warmup_steps takes a ratio < 1) [V].
    assert lookup("warmup_steps").current


def test_evaluation_strategy_is_an_old_4x_name():
    # REFERENCES.md §9: evaluation_strategy is absent from both 4.57.6 and 5.24.0 [V].
    info = lookup("evaluation_strategy")
    assert info is not None and info.current is False
    first, last = info.accepted["transformers"]
    assert first.startswith("4.") and last.startswith("4.")
    assert _version(last) < (4, 57, 6)
    assert "removed in 4." in info.versions_text()
    new = lookup("eval_strategy")
    assert new.current and _version(new.accepted["transformers"][1]) >= (5, 24)


def test_versions_text_names_each_library():
    text = lookup("learning_rate").versions_text()
    assert "transformers 4.36–" in text and "trl " in text
    assert "removed" not in text


def test_recipe_keys_come_from_the_extra_file_with_their_source():
    info = lookup("chat_template")
    assert info is not None and info.accepted == {}
    assert "recipe argument class" in info.versions_text()
    old = lookup("dataset_mixer")
    assert old is not None and old.current is False


def test_extra_keys_do_not_repeat_generated_keys_and_name_a_source():
    generated = json.loads((KNOWLEDGE / "known_keys.json").read_text(encoding="utf-8"))["layouts"]
    extra = json.loads((KNOWLEDGE / "extra_keys.json").read_text(encoding="utf-8"))["layouts"]
    for layout, entries in extra.items():
        assert layout in generated
        for name, item in entries.items():
            assert name not in generated[layout], f"{name} is now generated; drop it from extra_keys.json"
            assert item["source"].strip() and item["owners"], name


def test_generated_file_is_sorted_and_versions_ascend():
    text = (KNOWLEDGE / "known_keys.json").read_text(encoding="utf-8")
    data = json.loads(text)
    for lib, versions in data["scanned"].items():
        assert [_version(v) for v in versions] == sorted(_version(v) for v in versions), lib
    for layout, entries in data["layouts"].items():
        assert list(entries) == sorted(entries), layout
        for name, item in entries.items():
            for lib, (first, last) in item["accepted"].items():
                assert first in data["scanned"][lib] and last in data["scanned"][lib], (name, lib)
                assert _version(first) <= _version(last), (name, lib)


# --------------------------------------------------------------------------- public corpus

TRAINER_REPOS = {"huggingface/alignment-handbook", "huggingface/open-r1", "huggingface/trl"}


def _corpus_rows():
    if not (CORPUS / "PROVENANCE.tsv").is_file():
        pytest.skip("shared corpus not present")
    with (CORPUS / "PROVENANCE.tsv").open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh, delimiter="\t"))


def _kind(row) -> str:
    return row["description"].split(":", 1)[0].strip()


def _load(path: Path):
    text = path.read_text(encoding="utf-8")
    return json.loads(text) if path.suffix == ".json" else yaml.safe_load(text)


def test_trainer_style_corpus_files_have_only_known_top_level_keys():
    rows = [
        r
        for r in _corpus_rows()
        if r["repo"] in TRAINER_REPOS
        and _kind(r) not in ("accelerate", "accelerate/deepspeed", "deepspeed")
        and r["file"].endswith((".yaml", ".yml"))
    ]
    assert len(rows) >= 10  # alignment-handbook + open-r1 recipes and the TRL CLI example
    unknown = {}
    for row in rows:
        data = _load(CORPUS / row["file"])
        missing = [k for k in data if lookup(str(k), "trainer") is None]
        if missing:
            unknown[row["file"]] = missing
    assert unknown == {}


def test_peft_adapter_configs_in_corpus_are_fully_known():
    rows = [r for r in _corpus_rows() if r["file"].endswith("adapter_config.json")]
    assert rows
    for row in rows:
        data = _load(CORPUS / row["file"])
        assert [k for k in data if lookup(k, "peft-adapter") is None] == [], row["file"]


def test_deepspeed_and_accelerate_corpus_top_level_keys_are_known():
    checked = 0
    for row in _corpus_rows():
        kind = _kind(row)
        if kind == "deepspeed" and row["file"].endswith(".json"):
            layout = "deepspeed"
        elif kind in ("accelerate", "accelerate/deepspeed") and row["file"].endswith((".yaml", ".yml")):
            layout = "accelerate"
        else:
            continue
        try:
            data = _load(CORPUS / row["file"])
        except json.JSONDecodeError:
            continue  # the TEMPLATE file with bare placeholders is not JSON on purpose
        assert [k for k in data if lookup(k, layout) is None] == [], row["file"]
        checked += 1
    assert checked >= 20


# --------------------------------------------------------------------------- recipe runners


def test_runner_key_lists_name_their_release_and_files():
    data = json.loads((KNOWLEDGE / "runner_keys.json").read_text(encoding="utf-8"))["layouts"]
    # the releases the layouts' notes cite (axolotl 0.19.0, llamafactory 0.9.5, torchtune 0.6.1)
    assert data["axolotl"]["source"].startswith("axolotl 0.19.0")
    assert data["llama-factory"]["source"].startswith("llamafactory 0.9.5")
    assert data["torchtune"]["source"].startswith("torchtune 0.6.1")
    for entry in data.values():
        assert entry["files"] and entry["keys"]
        assert list(entry["keys"]) == sorted(entry["keys"])


def test_axolotl_keys_from_its_settings_model():
    # axolotl 0.19.0 utils/schemas/config.py AxolotlInputConfig and its bases
    for key in ("base_model", "adapter", "lora_r", "lora_alpha", "micro_batch_size", "num_epochs",
                "sequence_len", "sample_packing", "special_tokens", "tokens", "chat_template"):
        assert lookup(key, "axolotl") is not None, key
    assert lookup("lora_alpah", "axolotl") is None
    assert suggest("lora_alpah", "axolotl") == "lora_alpha"
    assert suggest("num_epoch", "axolotl") == "num_epochs"


def test_llama_factory_keys_include_transformers_training_arguments():
    # llamafactory 0.9.5 hparams: FinetuningArguments.lora_rank, DataArguments.cutoff_len; its
    # TrainingArguments derives from transformers' Seq2SeqTrainingArguments
    for key in ("lora_rank", "lora_target", "cutoff_len", "finetuning_type", "template",
                "per_device_train_batch_size", "learning_rate", "predict_with_generate"):
        assert lookup(key, "llama-factory") is not None, key
    assert suggest("gradient_accumulation_step", "llama-factory") == "gradient_accumulation_steps"


def test_torchtune_recipe_keys_and_component_parameters():
    from cfgcheck.knowledge.keys import _data

    # torchtune 0.6.1 recipes/lora_finetune_single_device.py reads cfg.epochs, cfg.batch_size...
    for key in ("epochs", "batch_size", "gradient_accumulation_steps", "max_steps_per_epoch",
                "enable_activation_checkpointing", "log_every_n_steps", "dtype", "checkpointer"):
        assert lookup(key, "torchtune") is not None, key
    comps = _data()["components"]["torchtune"]
    # torchtune 0.6.1 models/llama2/_model_builders.py lora_llama2_7b; qlora_llama2_7b is a partial of it
    lora = comps["torchtune.models.llama2.lora_llama2_7b"]
    assert {"lora_rank", "lora_alpha", "lora_attn_modules", "apply_lora_to_mlp"} <= set(lora["params"])
    assert comps["torchtune.models.llama2.qlora_llama2_7b"]["params"] == lora["params"]
    assert lora["open"] is False


def test_suggestions_search_only_keys_within_reach():
    from cfgcheck.knowledge.keys import _letter_gap, _osa_distance

    # the letter-count bound never exceeds the edit distance (each edit moves at most two counts)
    for a, b in [("lora_alpah", "lora_alpha"), ("num_epoch", "num_epochs"), ("abc", "xyz"),
                 ("learning_rate", "warmup_ratio"), ("", "ab")]:
        assert _letter_gap(a, b) <= _osa_distance(a, b, 99)


def test_every_known_key_is_found_by_its_written_path():
    # a file writes `zero_optimization: {stage: 3}` (a nested path) or, at the top level of
    # a table that has top-level keys, the dotted key itself; both name the same known key
    for layout in layouts():
        table = keys.table_of(layout)
        for name in table.keys:
            assert table.paths[tuple(name.split("."))] == name, (layout, name)
            if "" in table.groups and "." in name:
                assert table.paths[(name,)] == name, (layout, name)
    ds = keys.table_of("deepspeed")
    assert ds.paths[("zero_optimization", "stage")] == "zero_optimization.stage"
    # a parent that has no key list of its own (optimizer.params is free-form) is no path
    assert all(path[:-1] != ("optimizer", "params") for path in ds.paths)


def test_bounded_and_stale_paths_follow_the_release_ranges():
    table = keys.table_of("trainer")
    # warmup_ratio: transformers 4.36-5.14, removed in 5.15 (known_keys.json, generated); a fresh
    # install gets 5.24, which no longer takes it
    assert table.bounded[("warmup_ratio",)] == "warmup_ratio"
    assert ("warmup_ratio",) in table.stale
    assert ("learning_rate",) in table.bounded and ("learning_rate",) not in table.stale
    # a hand-maintained recipe key has no scanned release: no bounds to judge
    recipe = next(n for n, raw in table.keys.items() if not raw[1])
    assert (recipe,) not in table.bounded


def test_key_info_is_made_once_and_equals_the_assembled_tables():
    table = keys.table_of("peft-adapter")
    first = table.info("lora_alpha")
    assert first is table.info("lora_alpha") is keys.lookup("lora_alpha", "peft-adapter")
    assert keys._data()["infos"]["peft-adapter"]["lora_alpha"] == first
    assert first.versions_text() == first.versions_text()  # kept after the first time
    assert table.info("no_such_key_anywhere") is None
