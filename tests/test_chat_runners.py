"""The recipe runners' chat settings reach the chat-format rule as each runner applies them.

Configs are invented (the Saltmarsh team's assistants). The runners' behaviour is taken from
their sources: axolotl 0.19.0 src/axolotl/loaders/tokenizer.py (load_tokenizer: special_tokens
and tokens added; pad_token exempt from its lora_modules_to_save check) and
utils/chat_templates/base.py (get_chat_template returns the template string only);
LLaMA-Factory 0.9.5 src/llamafactory/hparams/model_args.py (add_tokens, add_special_tokens,
resize_vocab), model/patcher.py (added tokens turn resize_vocab on), model/adapter.py (a resized
LoRA run with no additional_target trains the embeddings) and data/template.py (stop words).
"""

from __future__ import annotations

import ast
import zipfile
from pathlib import Path

import pytest

from cfgcheck import engine
from cfgcheck.layouts import LLAMA_FACTORY

RULE = "chat-format-untrained-embeddings"
AX = ("base_model: meta-llama/Llama-2-7b-hf\nadapter: lora\nlora_r: 16\nlora_alpha: 32\n"
      "lora_target_linear: true\nmicro_batch_size: 2\nsequence_len: 2048\n")
LF = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nstage: sft\nfinetuning_type: lora\n"
      "lora_target: all\ncutoff_len: 2048\n")


def _hits(text, name="run.yaml"):
    report = engine.lint_text(text, name)
    assert report.problem is None and not report.internal
    return [f for f in report.findings if f.rule == RULE and f.severity.word != "info"]


def test_axolotl_chatml_markers_as_text_need_nothing():
    # no tokens added: <|im_start|> is split into pieces the Llama 2 vocabulary has
    assert _hits(AX + "chat_template: chatml\n") == []
    assert _hits(AX + "chat_template: jinja\nchat_template_jinja: \"{{ '<|im_start|>' }}\"\n") == []


def test_axolotl_new_eos_and_tokens_are_one_finding_with_both_places():
    text = AX + "chat_template: chatml\ntokens: [\"<|im_start|>\"]\nspecial_tokens:\n  eos_token: \"<|im_end|>\"\n"
    (hit,) = _hits(text)
    assert hit.key == "tokens" and hit.severity.word == "error"
    assert "<|im_start|>" in hit.message and "<|im_end|>" in hit.message
    assert [r.key for r in hit.related] == ["special_tokens.eos_token"]


def test_axolotl_pad_token_alone_is_not_judged():
    assert _hits(AX + "special_tokens:\n  pad_token: \"<|pad|>\"\n") == []


@pytest.mark.parametrize("trained", [
    "lora_modules_to_save: [embed_tokens, lm_head]\n",
    "unfrozen_parameters: [\"model.embed_tokens.weight\", \"lm_head.*\"]\n",
])
def test_axolotl_trained_embeddings_quiet_the_rule(trained):
    assert _hits(AX + trained + "special_tokens:\n  eos_token: \"<|im_end|>\"\n") == []


def test_axolotl_fix_inserts_the_modules_its_own_check_asks_for():
    text = AX + "special_tokens:\n  eos_token: \"<|im_end|>\"\n"
    (hit,) = _hits(text)
    (edit,) = hit.fix.edits
    # axolotl's ValueError asks for lora_modules_to_save = get_linear_embedding_layers(model_type)
    assert edit.path == ("lora_modules_to_save",) and edit.new == ["embed_tokens", "lm_head"]


def test_llama_factory_comma_lists_are_split():
    # added tokens turn resize_vocab on; additional_target names only one of the two embeddings
    (hit,) = _hits(LF + "add_special_tokens: \"<|im_start|>,<|im_end|>\"\nadditional_target: embed_tokens\n")
    assert hit.key == "add_special_tokens" and "2 new token(s)" in hit.message
    assert "lm_head" in hit.message and "embed_tokens and" not in hit.message
    (edit,) = hit.fix.edits
    assert edit.new == "embed_tokens,lm_head"  # the runner's comma text, kept as text


def test_llama_factory_template_without_resize_is_a_warning_naming_the_rows():
    (hit,) = _hits(LF + "template: llama3\n")
    # Llama 2's 32000 rows (config.json vocab_size); llama3's stop words <|eot_id|>, <|eom_id|>
    assert hit.severity.word == "warning" and "32,000 rows" in hit.message and "<|eot_id|>" in hit.message
    assert _hits(LF + "template: llama2\n") == []  # [INST] markers are text


def test_llama_factory_full_fine_tune_with_resize_is_quiet():
    text = LF.replace("finetuning_type: lora", "finetuning_type: full") + "template: chatml\nresize_vocab: true\n"
    assert _hits(text) == []


_WHEEL = Path.home() / ".cache" / "cfgcheck-keys" / "llamafactory-0.9.5-py3-none-any.whl"


@pytest.mark.skipif(not _WHEEL.is_file(), reason="the LLaMA-Factory 0.9.5 wheel is not in the key-generation cache")
def test_template_stop_words_match_the_llama_factory_release():
    source = zipfile.ZipFile(_WHEEL).read("llamafactory/data/template.py").decode()
    registered = {}
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Call) and getattr(node.func, "id", "") == "register_template":
            kw = {k.arg: k.value for k in node.keywords}
            name = ast.literal_eval(kw["name"])
            stop = ast.literal_eval(kw["stop_words"]) if "stop_words" in kw else []
            registered[name] = tuple(stop)
    for name, words in LLAMA_FACTORY.template_stop_words.items():
        assert registered[name] == words, name
