"""The fixer under hostile input: meaning kept per setting type, shared values, linked files,
concurrent writers, files that must not be replaced, odd line ends and layouts, and messages."""

from __future__ import annotations

import io
import os
import stat
import threading

import pytest
import yaml
from typer.testing import CliRunner

from cfgcheck import api, engine, fix
from cfgcheck.fix import edits as fix_edits, proof as fix_proof, write as fix_write
from cfgcheck.render.fixes import summary_text
from cfgcheck.cli import app

HEAD = "model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"


def _ruamel(text):
    from ruamel.yaml import YAML

    return YAML(typ="safe", pure=True).load(io.StringIO(text))


def _cli(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


# --------------------------------------------------------------------------- meaning per type

def test_text_setting_read_as_a_number_is_quoted_not_rewritten_as_one():
    text = HEAD + "output_dir: 1e3\nrevision: 1234e56\nrun_name: 5e5\nhub_model_id: 7e1\ntags: [3e4]\n"
    result = fix.fix_text(text, "a.yaml", api.make_options())
    new = result.new_text
    for key, raw in [("output_dir", "1e3"), ("revision", "1234e56"), ("run_name", "5e5"),
                     ("hub_model_id", "7e1")]:
        assert f'{key}: "{raw}"' in new
        # PyYAML (YAML 1.1) and ruamel.yaml (YAML 1.2) now both read the text
        assert yaml.safe_load(new)[key] == _ruamel(new)[key] == raw
    assert yaml.safe_load(new)["tags"] == _ruamel(new)["tags"] == ["3e4"]
    assert yaml.safe_load(new)["learning_rate"] == 2.0e-5


def test_word_boolean_in_a_text_setting_never_becomes_a_boolean():
    text = HEAD + "chat_template: yes\nhub_strategy: off\n"
    # quoting would change what PyYAML gives (a boolean today): not a meaning-keeping rewrite
    for training in (False, True):
        assert fix.fix_text(text, "a.yaml", api.make_options(), training=training).new_text == text
    found = {f.key: f for f in api.lint_text(text, "a.yaml").findings
             if f.rule == "yaml-version-dependent-value"}
    assert '"off" in quotes' in found["hub_strategy"].hint and found["hub_strategy"].fix is None


def test_ambiguous_value_of_an_unknown_key_is_left_alone_with_a_note():
    text = HEAD + "my_team_setting: 1e3\nother_switch: on\n"
    report = api.lint_text(text, "a.yaml")
    mine = [f for f in report.findings if f.rule == "yaml-version-dependent-value"]
    assert {f.key for f in mine} == {"my_team_setting", "other_switch"}
    assert all(f.fix is None for f in mine)
    by_key = {f.key: f for f in mine}
    assert "does not know" in by_key["my_team_setting"].message
    assert "true" in by_key["other_switch"].hint and '"on" in quotes' in by_key["other_switch"].hint
    assert fix.fix_text(text, "a.yaml", api.make_options(), training=True).new_text == text


def test_number_and_boolean_settings_still_get_their_rewrite():
    text = HEAD.replace("2.0e-5", "2e-5") + "bf16: yes\n"
    new = fix.fix_text(text, "a.yaml", api.make_options()).new_text
    assert "learning_rate: 2.0e-5" in new and "bf16: true" in new


# --------------------------------------------------------------------------- shared values

def test_value_shared_through_a_merge_key_is_not_changed():
    text = (HEAD.replace("2.0e-5", "2.0e-4") + "use_peft: true\nlora: &lora {r: 16, alpha: 8}\n"
            "eval_adapter: {<<: *lora, r: 4}\n")
    result = fix.fix_text(text, "a.yaml", api.make_options(), training=True)
    assert yaml.safe_load(result.new_text)["eval_adapter"]["alpha"] == 8
    assert any("merge key" in n for n in result.notes)


# --------------------------------------------------------------------------- linked files

TRAINER = "model_name_or_path: meta-llama/Llama-2-7b-hf\nbf16: true\ndeepspeed: {ds}\nlearning_rate: 2.0e-5\n"
DS = '{"bf16": {"enabled": true}, "zero_optimization": {"stage": 2}, "train_micro_batch_size_per_gpu": "auto"}\n'


@pytest.mark.parametrize("names", [("a_train.yaml", "z_ds.json"), ("z_train.yaml", "a_ds.json")])
def test_linked_files_are_fixed_together_whatever_their_names(tmp_path, names):
    trainer, ds = (tmp_path / n for n in names)
    trainer.write_text(TRAINER.format(ds=ds.name))
    ds.write_text(DS)
    report = api.fix([tmp_path], training=True, gpu="t4")  # a T4 has no bf16 (NVIDIA: CC 7.5)
    assert {f.file for f in report.changed} == {str(trainer), str(ds)}
    assert yaml.safe_load(trainer.read_text())["fp16"] is True
    assert yaml.safe_load(ds.read_text())["fp16"] == {"enabled": True}
    again = api.fix([tmp_path], training=True, gpu="t4")
    assert not again.changed and not again.errors


def test_linked_files_are_written_together_or_not_at_all(tmp_path):
    trainer, ds = tmp_path / "train.yaml", tmp_path / "ds.json"
    trainer.write_text(TRAINER.format(ds="ds.json"))
    ds.write_text(DS)
    os.chmod(ds, 0o444)
    report = api.fix([tmp_path], training=True, gpu="t4")
    assert trainer.read_text() == TRAINER.format(ds="ds.json") and ds.read_text() == DS
    assert not report.changed and len(report.refused) == 2
    assert api.fix_exit_code(report) == api.EXIT_INPUT


# --------------------------------------------------------------------------- writing

TEXT = HEAD.replace("2.0e-5", "2e-5")


def test_write_between_check_and_rename_is_not_lost(tmp_path, monkeypatch):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    theirs = TEXT + "num_train_epochs: 3\n"
    monkeypatch.setattr(fix_write, "_before_rename", lambda target: open(target, "w").write(theirs))
    result = fix.fix_file(p, api.make_options())
    assert result.refused and not result.written and p.read_text() == theirs
    assert [x.name for x in tmp_path.iterdir()] == ["run.yaml"]


def test_write_into_the_old_file_during_the_rename_is_put_back(tmp_path, monkeypatch):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    theirs = TEXT + "num_train_epochs: 3\n"
    real = fix_write._rename

    def racing(tmp, target):
        with open(target, "w") as fh:  # an editor writes in place just before our rename lands
            fh.write(theirs)
        real(tmp, target)

    monkeypatch.setattr(fix_write, "_rename", racing)
    result = fix.fix_file(p, api.make_options())
    assert result.refused and "put back" in result.refused and p.read_text() == theirs
    assert [x.name for x in tmp_path.iterdir()] == ["run.yaml"]


def test_read_only_file_is_not_replaced(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    os.chmod(p, 0o444)
    result = fix.fix_file(p, api.make_options())
    assert result.refused and "not writable" in result.refused and p.read_text() == TEXT
    assert not result.changed  # a refused write is not counted as a change
    assert "0 changed" in summary_text(fix.FixReport([result]), dry=False)
    assert "1 not written" in summary_text(fix.FixReport([result]), dry=False)


def test_hard_linked_file_is_not_split(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    os.link(p, tmp_path / "other.yaml")
    result = fix.fix_file(p, api.make_options())
    assert result.refused and "hard links" in result.refused
    assert os.stat(p).st_ino == os.stat(tmp_path / "other.yaml").st_ino and p.read_text() == TEXT


def test_owner_of_the_file_never_changes(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    if os.geteuid() == 0:
        os.chown(p, 4321, 4321)
        result = fix.fix_file(p, api.make_options())
        assert result.written and (p.stat().st_uid, p.stat().st_gid) == (4321, 4321)
    else:  # another user's file cannot be made ours: refused
        pytest.skip("needs root to create a file owned by another user")


def test_extended_attributes_are_kept(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    try:
        os.setxattr(p, "user.team", b"tidewater")
    except (OSError, AttributeError):
        pytest.skip("this file system keeps no user extended attributes")
    result = fix.fix_file(p, api.make_options())
    assert result.written and os.getxattr(p, "user.team") == b"tidewater"


# --------------------------------------------------------------------------- reading

def test_fifo_named_like_a_config_is_refused_without_hanging(tmp_path):
    p = tmp_path / "x.yaml"
    os.mkfifo(p)
    box = {}
    t = threading.Thread(target=lambda: box.setdefault("r", fix.fix_file(p, api.make_options())),
                         daemon=True)
    t.start()
    t.join(30)
    assert "r" in box and "not a regular file" in box["r"].problem.reason


def test_link_to_dev_zero_and_huge_file_are_refused(tmp_path):
    z = tmp_path / "zero.yaml"
    z.symlink_to("/dev/zero")
    assert "not a regular file" in fix.fix_file(z, api.make_options()).problem.reason
    big = tmp_path / "big.yaml"
    with open(big, "wb") as fh:
        fh.truncate(600 * 1024 * 1024)  # sparse: takes no disk
    assert "over the" in fix.fix_file(big, api.make_options()).problem.reason


# --------------------------------------------------------------------------- cost

def test_many_documents_are_linted_a_fixed_number_of_times(monkeypatch):
    calls = []  # every lint of a file's documents, from its text or from documents parsed already
    rest = []  # every run of the other rules on views opened already
    real, real_rest = engine.lint_documents, engine.lint_rest
    monkeypatch.setattr(engine, "lint_documents", lambda *a, **k: calls.append(1) or real(*a, **k))
    monkeypatch.setattr(engine, "lint_rest",
                        lambda *a, **k: rest.append(real_rest(*a, **k)) or rest[-1])
    text = "---\n".join(HEAD.replace("2.0e-5", "2e-5") for _ in range(300))
    result = fix.fix_text(text, "many.yaml", api.make_options())
    assert len(result.applied) == 300 and result.new_text.count("2.0e-5") == 300
    # before: the rules that fix, then (a fix is to be made) the other rules on the same views,
    # not a second lint; then the proof's re-lint (the stability pass reuses it)
    assert len(calls) == 2
    assert len(rest) == 1 and rest[0] is not None
    calls.clear()
    rest.clear()
    clean = fix.fix_text(result.new_text, "many.yaml", api.make_options())
    assert not clean.changed and len(calls) == 1 and not rest  # nothing to fix: the rules that fix, once


def test_many_repeated_comment_lines_keep_the_proof_exact():
    text = HEAD.replace("2.0e-5", "2e-5") + "#\n" * 20000
    result = fix.fix_text(text, "c.yaml", api.make_options())
    assert result.error is None and result.new_text == text.replace("2e-5", "2.0e-5")
    bad = fix_edits._TextEdit(len(HEAD) - 5, len(HEAD) - 5, "", "r")
    assert fix_proof._outside_lines_identical(text, text[:-2] + "x\n", [bad]) is not None


# --------------------------------------------------------------------------- odd layouts

T4 = dict(training=True)


def _t4(text, name="a.yaml"):
    return fix.fix_text(text, name, api.make_options(gpu="t4"), **T4)


def test_cr_only_line_ends_with_an_insertion():
    text = "model_name_or_path: meta-llama/Llama-2-7b-hf\rbf16: true\rlearning_rate: 2e-5\r"
    result = _t4(text)
    assert result.error is None
    assert result.new_text == ("model_name_or_path: meta-llama/Llama-2-7b-hf\rbf16: false\r"
                               "fp16: true\rlearning_rate: 2.0e-5\r")


def test_complex_key_gets_its_sibling_at_the_question_mark_column():
    text = "model_name_or_path: meta-llama/Llama-2-7b-hf\n? bf16\n: true\nlearning_rate: 2.0e-5\n"
    result = _t4(text)
    assert result.error is None
    data = yaml.safe_load(result.new_text)
    assert data["bf16"] is False and data["fp16"] is True


def test_doubled_byte_order_mark_is_kept():
    text = "\ufeffmodel_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2e-5\n"
    result = fix.fix_text(text, "a.yaml", api.make_options())
    assert result.error is None and result.new_text == text.replace("2e-5", "2.0e-5")


def test_commented_last_member_of_a_multiline_flow_mapping_keeps_its_comment():
    text = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nlearning_rate: 2.0e-5\n"
            "args: {\n  lr: 1,\n  bf16: true  # mixed precision\n}\n")
    result = _t4(text)
    assert result.error is None
    assert "  bf16: false, # mixed precision\n  fp16: true\n}" in result.new_text


def test_appending_to_a_multiline_flow_list_keeps_the_last_comment_on_its_item():
    # ChatML's markers are special tokens a Llama 2 base lacks, so the chat-format rule appends
    # embed_tokens to the trainable modules (the head is listed already)
    text = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
            "lora_modules_to_save: [\n  lm_head  # the head already trains\n]\n"
            "chat_template: \"<|im_start|>user\"\nlearning_rate: 2.0e-4\n")
    result = fix.fix_text(text, "a.yaml", api.make_options(skip=["full-modules-at-adapter-lr"]),
                          training=True)
    assert result.error is None
    assert "  lm_head,  # the head already trains\n  embed_tokens\n]" in result.new_text
    assert yaml.safe_load(result.new_text)["lora_modules_to_save"] == ["lm_head", "embed_tokens"]


# --------------------------------------------------------------------------- messages

CHAT = ("model_name_or_path: meta-llama/Llama-2-7b-hf\nuse_peft: true\nlora_r: 16\nlora_alpha: 32\n"
        "lora_target_modules: [q_proj, v_proj]\nchat_template: \"<|im_start|>user\"\nlearning_rate: 2e-4\n")


def test_new_finding_withholds_only_the_fix_that_brings_it_and_names_it():
    result = fix.fix_text(CHAT, "a.yaml", api.make_options(), training=True)
    assert [a.rule for a in result.applied] == ["yaml-version-dependent-value"]
    note = next(n for n in result.notes if n.startswith("chat-format-untrained-embeddings"))
    assert "full-modules-at-adapter-lr" in note
    # the fixed text has no finding the old one had not, info included
    old = {(f.rule, f.key) for f in api.lint_text(CHAT, "a.yaml").findings}
    assert {(f.rule, f.key) for f in api.lint_text(result.new_text, "a.yaml").findings
            if f.data.get("judged") is not False} <= old


def test_summary_says_exactly_what_is_written():
    text = HEAD.replace("2.0e-5", "3E-2") + "weight_decay: 12e-5\n"
    result = fix.fix_text(text, "a.yaml", api.make_options())
    for a in result.applied:
        written = a.summary.split(" -> ")[1]
        assert f"{a.key}: {written}\n" in result.new_text


def test_halve_batch_repeated_halves_again(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(HEAD + "per_device_train_batch_size: 8\ngradient_accumulation_steps: 1\n")
    out = _cli("fix", "--halve-batch", "--halve-batch", p)
    assert out.exit_code == 0, out.output
    data = yaml.safe_load(p.read_text())
    assert (data["per_device_train_batch_size"], data["gradient_accumulation_steps"]) == (2, 4)


def test_summary_never_says_nothing_to_fix_beside_withheld_fixes(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(HEAD + "bf16: true\n")
    out = _cli("fix", "--gpu", "t4", p)
    assert "nothing to fix" not in out.output
    assert "no fix applied; 1 left that change training" in out.output


def test_fix_says_when_a_rule_needs_a_flag(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_text(HEAD + "bf16: true\n")
    out = _cli("fix", p)
    assert ("precision-unsupported-on-gpu could not judge 1 file without --gpu, so it proposed no "
            "fix there; pass --gpu NAME") in out.output


def test_every_tag_in_the_fix_output_is_a_rule_id_or_the_halving_option(tmp_path):
    from cfgcheck.catalogue import load_catalogue

    p = tmp_path / "run.yaml"
    p.write_text(HEAD.replace("2.0e-5", "2e-5") + "bf16: true\nper_device_train_batch_size: 8\n")
    out = _cli("fix", "--gpu", "t4", "--allow-training-changes", "--halve-batch", "--diff", p)
    import re

    tags = set(re.findall(r"\[([^\]\s]+)\]$", out.output, re.M))
    assert tags and tags <= set(load_catalogue()) | {"--halve-batch"}


# --------------------------------------------------------------------------- the proof

def test_fixing_the_fixed_text_changes_nothing_is_part_of_the_proof(monkeypatch):
    real = fix._fix_body

    def unstable(text, *a, **k):
        out = real(text, *a, **k)
        if not k.get("check_stable", True):  # the stability pass: pretend it changes more
            out.new_text = out.new_text + "# more\n"
        return out

    monkeypatch.setattr(fix, "_fix_body", unstable)
    result = fix.fix_text(TEXT, "a.yaml", api.make_options())
    assert result.error is not None and "changes it again" in result.error.error
    assert result.evidence["check"] == "stability"


def test_failed_proof_saves_its_evidence_for_a_bug_report(tmp_path, monkeypatch):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    monkeypatch.setattr(fix_proof, "_outside_lines_identical", lambda *a: "line 9 changed (injected)")
    result = fix.fix_file(p, api.make_options())
    assert p.read_text() == TEXT and result.error is not None
    where = result.evidence_file
    assert where and where in result.error.error and os.path.exists(where)
    body = open(where, encoding="utf-8").read()
    assert "line 9 changed (injected)" in body and TEXT in body and "2.0e-5" in body
    os.unlink(where)


def test_file_replaced_by_another_program_during_the_rename_keeps_their_version(tmp_path, monkeypatch):
    p = tmp_path / "run.yaml"
    p.write_text(TEXT)
    theirs = TEXT + "num_train_epochs: 3\n"
    real = fix_write._rename

    def racing(tmp, target):
        other = tmp_path / "editor-save.tmp"
        other.write_text(theirs)
        os.replace(other, target)  # an editor saves by renaming its own temp file over ours
        return real(tmp, target)

    monkeypatch.setattr(fix_write, "_rename", racing)
    result = fix.fix_file(p, api.make_options())
    if not fix_write._exchange_supported(str(tmp_path)):
        pytest.skip("no atomic exchange on this system: documented as the remaining window")
    assert result.refused and p.read_text() == theirs
    assert [x.name for x in tmp_path.iterdir()] == ["run.yaml"]


def test_summary_of_an_inserted_json_section_is_the_json_written(tmp_path):
    ds = tmp_path / "ds.json"
    ds.write_text(DS)
    result = fix.fix_file(ds, api.make_options(gpu="t4"), training=True, write=False)
    (summary,) = [a.summary for a in result.applied]
    assert 'fp16: added as {"enabled": true}' in summary and '"fp16": {"enabled": true}' in result.new_text


@pytest.mark.parametrize("case", ["chat-block.yaml", "chat-args.json"])
def test_summary_of_a_list_written_over_several_lines_stays_one_line(case):
    from pathlib import Path

    src = Path(__file__).resolve().parents[1] / "fixtures" / "fix" / case.replace(".", ".in.", 1)
    result = fix.fix_text(src.read_text(), case, api.make_options(skip=["full-modules-at-adapter-lr"]),
                          training=True)
    (summary,) = [a.summary for a in result.applied]
    assert "\n" not in summary and "embed_tokens, lm_head" in summary


def test_linked_file_is_not_fixed_alone_when_its_partner_cannot_follow(tmp_path):
    trainer, ds = tmp_path / "train.yaml", tmp_path / "ds.json"
    # bf16 comes through an alias, so the trainer's precision fix is withheld; the DeepSpeed
    # file's own fix would then contradict the trainer (transformers' DeepSpeed integration
    # refuses a bf16 mismatch): neither is written
    text = TRAINER.format(ds="ds.json").replace("bf16: true\n", "precision: &p true\nbf16: *p\n")
    trainer.write_text(text)
    ds.write_text(DS)
    report = api.fix([tmp_path], training=True, gpu="t4")
    assert trainer.read_text() == text and ds.read_text() == DS and not report.changed
    assert all(any("deepspeed-file-contradicts-config" in n for n in f.notes) for f in report.files)


def test_fix_summary_escapes_keys_and_file_names(tmp_path):
    p = tmp_path / "run\nx.yaml:1:1: error: forged.yaml"
    p.write_text(HEAD.replace("2.0e-5", "2e-5") + '"odd\\nkey": on\n')
    out = summary_text(api.fix([p]), dry=True)
    assert all(not line.startswith(("x.yaml", "key")) for line in out.splitlines())
    assert "run\\nx.yaml" in out


def test_exponent_past_2_to_the_53_is_reported_and_fixed_not_an_internal_error():
    text = HEAD + "revision: 1234e56\nweight_decay: 1e60\n"
    report = api.lint_text(text, "a.yaml")
    assert not report.internal
    result = fix.fix_text(text, "a.yaml", api.make_options())
    assert result.error is None and 'revision: "1234e56"' in result.new_text
