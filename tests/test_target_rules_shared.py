"""The adapter-target rules of one view share the model's table of linear layers: worked out once
for the view, the same findings and the same "not checked" notes as when each rule works it out."""

from __future__ import annotations

import json

from cfgcheck import api
from cfgcheck.checks import targets

from .helpers import LLAMA2_7B_CONFIG

RULES = ("lora-rank-above-matrix-dim", "lora-target-not-in-model")


def _config(tmp_path, shape: dict, name: str = "run.yaml"):
    ckpt = tmp_path / f"ckpt-{name}"
    ckpt.mkdir(exist_ok=True)
    (ckpt / "config.json").write_text(json.dumps(shape))
    cfg = tmp_path / name
    # PEFT-style keys: r above Llama 2 7B's smallest projection (4096), two targets, one unknown
    cfg.write_text(f"model_name_or_path: {ckpt}\nuse_peft: true\nlora_r: 5000\nlora_alpha: 10000\n"
                   "lora_target_modules: [q_proj, qq_proj]\nlearning_rate: 2.0e-5\n")
    return cfg


def _shown(report):
    return sorted((f.rule, f.message, tuple(sorted(map(str, f.data.items())))) for f in report.findings
                  if f.rule in RULES)


def test_the_linear_table_is_made_once_per_view_and_the_findings_are_unchanged(monkeypatch, tmp_path):
    cfg = _config(tmp_path, LLAMA2_7B_CONFIG)
    calls = []
    real = targets.linear_modules
    monkeypatch.setattr(targets, "linear_modules", lambda arch: calls.append(arch) or real(arch))
    shared = api.lint([str(cfg)], project=None)
    assert not shared.internal
    assert len(calls) == 1  # both rules asked; the second had the view's answer
    rules = {f.rule for f in shared.findings}
    assert "lora-rank-above-matrix-dim" in rules
    assert "lora-target-not-in-model" in rules  # qq_proj
    # each rule working the table out for itself says the same
    monkeypatch.setattr(targets, "_arch_or_judge", _unshared)
    alone = api.lint([str(cfg)], project=None)
    assert _shown(alone) == _shown(shared)


def test_an_unsupported_family_is_a_note_of_each_rule(tmp_path):
    cfg = _config(tmp_path, dict(LLAMA2_7B_CONFIG, model_type="bloom"))
    report = api.lint([str(cfg)], project=None)
    assert not report.internal
    notes = sorted(f.rule for f in report.findings if f.data.get("judged") is False and f.rule in RULES)
    assert notes == sorted(RULES)
    reasons = {f.data["reason"] for f in report.findings if f.data.get("judged") is False and f.rule in RULES}
    assert len(reasons) == 1 and "bloom" in next(iter(reasons))


def test_the_table_of_one_file_never_answers_for_another(tmp_path):
    # the answer lives with the view, keyed by the architecture object: another model, another table
    small = dict(LLAMA2_7B_CONFIG, hidden_size=1024, intermediate_size=2816)
    first, second = _config(tmp_path, LLAMA2_7B_CONFIG, "a.yaml"), _config(tmp_path, small, "b.yaml")
    for cfg, smallest in ((first, 4096), (second, 1024)):
        found = [f for f in api.lint([str(cfg)], project=None).findings if f.rule == RULES[0]]
        assert [f.data["smallest"] for f in found] == [smallest]


def _unshared(ctx):
    arch = ctx.model()
    if arch is None:
        ctx.cannot_judge("the base model's architecture is not known offline "
                         "(name a local folder with config.json, or a model in the local hub cache)")
        return None
    try:
        return arch, targets.linear_modules(arch)
    except targets.UnsupportedFamily as exc:
        ctx.cannot_judge(str(exc))
        return None
