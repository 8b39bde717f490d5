"""Edge cases of the catalogue rules beyond their catalogue examples.

Model shapes come from the bundled catalogue (cfgcheck/knowledge/base_models.json, copied from the
models' config.json files); module names from transformers' modeling files and torchtune's
component builders.
"""

from __future__ import annotations

from cfgcheck.findings import Severity

from .helpers import found, lint


def _rule(text, rule, **options):
    report = lint(text, **options)
    assert report.problem is None and not report.internal
    return [f for f in report.findings if f.rule == rule]


TT = """\
model:
  _component_: torchtune.models.llama3_1.lora_llama3_1_8b
  lora_attn_modules: {mods}
  apply_lora_to_mlp: {mlp}
  lora_rank: 8
  lora_alpha: 16
checkpointer:
  _component_: torchtune.training.FullModelHFCheckpointer
optimizer:
  lr: 3.0e-4
batch_size: 2
epochs: 1
enable_activation_checkpointing: true
"""


def test_torchtune_targets_use_torchtune_names():
    # torchtune lora_attn_modules take q_proj, k_proj, v_proj, output_proj (not o_proj)
    ok = TT.format(mods="[q_proj, v_proj, output_proj]", mlp="true")
    assert _rule(ok, "lora-target-not-in-model") == []
    bad = TT.format(mods="[q_proj, o_proj]", mlp="true")
    hits = _rule(bad, "lora-target-not-in-model")
    assert [(f.key, f.severity) for f in hits] == [("model.lora_attn_modules", Severity.WARNING)]
    assert "o_proj -> output_proj" in hits[0].hint


def test_torchtune_attention_only_unless_mlp():
    assert _rule(TT.format(mods="[q_proj, v_proj]", mlp="false"), "lora-attention-only-targets")
    assert _rule(TT.format(mods="[q_proj, v_proj]", mlp="true"), "lora-attention-only-targets") == []


LF = ("model_name_or_path: meta-llama/Llama-3.1-8B\nstage: sft\nfinetuning_type: lora\ncutoff_len: 2048\n"
      "template: llama3\nlora_rank: 16\nlora_target: {targets}\n")


def test_llama_factory_comma_targets_and_all():
    assert _rule(LF.format(targets="all"), "lora-target-not-in-model") == []
    assert _rule(LF.format(targets="q_proj,v_proj"), "lora-target-not-in-model") == []
    hits = _rule(LF.format(targets="q_proj,value"), "lora-target-not-in-model")
    assert hits and hits[0].data["missing"] == "value" and hits[0].severity == Severity.WARNING


def test_no_target_matches_is_an_error():
    # PEFT inject_adapter raises "Target modules ... not found in the base model" when none matches
    hits = _rule(LF.format(targets="query,value"), "lora-target-not-in-model")
    assert hits[0].severity == Severity.ERROR


def test_rank_above_kv_projection():
    # Llama-3.1-8B config.json: hidden 4096, 8 kv heads x head_dim 128 -> k_proj/v_proj out 1024
    text = LF.format(targets="q_proj,k_proj,v_proj").replace("lora_rank: 16", "lora_rank: 2048")
    hits = _rule(text, "lora-rank-above-matrix-dim")
    assert hits and hits[0].data["smallest"] == 1024 and hits[0].data["module"] in ("k_proj", "v_proj")
    text = LF.format(targets="q_proj").replace("lora_rank: 16", "lora_rank: 2048")
    assert _rule(text, "lora-rank-above-matrix-dim") == []  # q_proj is 4096 x 4096


def test_model_rules_say_once_when_the_model_is_unknown():
    text = "model_name_or_path: fjordline/unreleased-9b\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n" \
           "lora_target_modules: [q_proj, v_proj]\nmax_seq_length: 8192\nfp16: true\n"
    report = lint(text)
    notes = [f for f in report.findings if f.data.get("judged") is False]
    by_rule = {}
    for f in notes:
        by_rule.setdefault(f.rule, []).append(f)
    for rule in ("lora-target-not-in-model", "lora-rank-above-matrix-dim", "seq-len-above-context-window",
                 "fp16-training-of-bf16-model"):
        assert len(by_rule.get(rule, [])) == 1, rule
        assert by_rule[rule][0].severity == Severity.INFO


def test_seq_len_against_context_window():
    # Llama-2-7b-hf config.json: max_position_embeddings 4096 (Touvron et al. 2023: context 4096)
    base = "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 1.0e-5\nmax_seq_length: {n}\n"
    assert ("seq-len-above-context-window", "max_seq_length") in found(base.format(n=4097))
    assert ("seq-len-above-context-window", "max_seq_length") not in found(base.format(n=4096))


def test_warmup_fraction_boundary():
    # threshold 0.2 of the run (catalogue record); 200 of 1000 steps is exactly a fifth
    base = "learning_rate: 2.0e-5\nmax_steps: 1000\nwarmup_steps: {w}\n"
    assert not [f for f in _rule(base.format(w=200), "warmup-longer-than-run") if f.severity >= Severity.WARNING]
    assert _rule(base.format(w=201), "warmup-longer-than-run")[0].data["percent"] == 20.1


def test_warmup_steps_below_one_is_a_ratio():
    # transformers 5.x: warmup_steps below 1 is a ratio of the run
    hits = _rule("learning_rate: 2.0e-5\nwarmup_steps: 0.5\n", "warmup-longer-than-run")
    assert hits and hits[0].data["variant"] == "ratio-over-limit"


def test_best_model_ratio_steps():
    # transformers: both ratios are compared as (s*1e6) % (e*1e6)
    base = ("learning_rate: 2.0e-5\nload_best_model_at_end: true\neval_strategy: steps\nsave_strategy: steps\n"
            "eval_steps: {e}\nsave_steps: {s}\n")
    assert _rule(base.format(e=0.1, s=0.2), "best-model-needs-matching-cadence") == []
    assert _rule(base.format(e=0.1, s=0.25), "best-model-needs-matching-cadence")
    assert _rule(base.format(e=0.1, s=500), "best-model-needs-matching-cadence")[0].data["variant"] == "mixed"


def test_word_boolean_strategy_is_reported_once():
    # `save_strategy: no` is the boolean False for PyYAML: the YAML rule says so, not the schema rule
    rules = [r for r, _ in found("learning_rate: 2.0e-5\nsave_strategy: no\n")]
    assert "yaml-version-dependent-value" in rules and "value-outside-schema" not in rules


def test_fp4_only_where_bitsandbytes_defaults_apply():
    # BitsAndBytesConfig defaults bnb_4bit_quant_type to fp4; LLaMA-Factory's quantization_type to nf4
    lf = "model_name_or_path: a/b\nstage: sft\nfinetuning_type: lora\ncutoff_len: 1024\ntemplate: x\nquantization_bit: 4\n"
    assert _rule(lf, "quant-fp4-where-nf4-is-better") == []
    assert _rule(lf + "quantization_type: fp4\n", "quant-fp4-where-nf4-is-better")


def test_torchtune_names_in_a_trainer_file_get_the_transformers_name():
    # transformers LlamaAttention names the output projection o_proj; torchtune calls it output_proj
    text = ("model_name_or_path: meta-llama/Llama-3.1-8B\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
            "lora_target_modules: [q_proj, v_proj, output_proj]\n")
    hits = _rule(text, "lora-target-not-in-model")
    assert hits and "output_proj -> o_proj" in hits[0].hint
