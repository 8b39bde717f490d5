"""The context the engine hands to the rules: one per view, shared by the rules in turn, with
nothing of one rule's reaching the next (its thresholds, its cannot-judge notes, its findings
when it fails), and answers shared by the rules of one view never reaching another view."""

from __future__ import annotations

from cfgcheck import api, checks
from cfgcheck.catalogue import load_catalogue
from cfgcheck.checks import releases
from cfgcheck.findings import Severity

from .helpers import lint

TEXT = "model_name_or_path: acme/tiny-7b\nlearning_rate: 1.0e-5\nlora_alpha: 16\nr: 8\n"


def _two_rules_with_thresholds() -> tuple[str, str]:
    with_thresholds = [rid for rid, rule in load_catalogue().items() if rule.thresholds]
    assert len(with_thresholds) >= 2
    return with_thresholds[0], with_thresholds[1]


def test_each_rule_sees_its_own_thresholds_and_its_own_overrides(monkeypatch):
    first, second = _two_rules_with_thresholds()
    seen: dict[str, list[dict]] = {first: [], second: []}
    for rid in (first, second):
        monkeypatch.setitem(checks.all_checks(), rid,
                            lambda ctx, rid=rid: seen[rid].append(dict(ctx.thresholds)))
    cat = load_catalogue()
    defaults = {rid: {n: cat[rid].threshold(n) for n in cat[rid].thresholds} for rid in (first, second)}
    lint(TEXT)
    assert seen[first] == [defaults[first]] and seen[second] == [defaults[second]]
    name = next(iter(cat[first].thresholds))
    lint(TEXT, thresholds={first: {name: 12345}})
    assert seen[first][-1] == dict(defaults[first], **{name: 12345})
    assert seen[second][-1] == defaults[second]  # another rule keeps its own values
    lint(TEXT, thresholds={first: {name: 54321}})  # a changed override is looked up afresh
    assert seen[first][-1][name] == 54321
    lint(TEXT)  # and a run without it is back to the record's values
    assert seen[first][-1] == defaults[first]


def test_cannot_judge_is_once_per_rule_not_once_per_view(monkeypatch):
    first, second = _two_rules_with_thresholds()

    def unsure(ctx):
        ctx.cannot_judge("nothing to go on")
        ctx.cannot_judge("nothing to go on")  # said once for this rule

    for rid in (first, second):
        monkeypatch.setitem(checks.all_checks(), rid, unsure)
    report = lint(TEXT)
    notes = sorted(f.rule for f in report.findings if f.data.get("reason") == "nothing to go on")
    assert notes == sorted([first, second])
    assert all(f.severity is Severity.INFO for f in report.findings if f.data.get("reason") == "nothing to go on")


def test_a_failing_rule_leaves_no_findings_and_the_others_go_on(monkeypatch):
    first, second = _two_rules_with_thresholds()

    def reports_then_fails(ctx):
        ctx.cannot_judge("half done")
        raise RuntimeError("a bug in the rule")

    monkeypatch.setitem(checks.all_checks(), first, reports_then_fails)
    monkeypatch.setitem(checks.all_checks(), second, lambda ctx: ctx.cannot_judge("done"))
    report = lint(TEXT)
    assert [e.rule for e in report.internal] == [first]
    assert "a bug in the rule" in report.internal[0].error
    assert not [f for f in report.findings if f.rule == first]
    assert [f.data["reason"] for f in report.findings if f.rule == second] == ["done"]


def test_answers_shared_by_the_rules_of_a_view_stay_with_that_view(tmp_path):
    # known_keys.json: evaluation_strategy accepted by transformers 4.36-4.50, absent from 4.51
    text = "model_name_or_path: acme/tiny-7b\nevaluation_strategy: steps\neval_steps: 10\n"
    old, new = tmp_path / "old", tmp_path / "new"
    for folder, pin in ((old, "4.44.2"), (new, "4.57.1")):
        folder.mkdir()
        (folder / "requirements.txt").write_text(f"transformers=={pin}\n")
        (folder / "train.yaml").write_text(text)
    report = api.lint([str(old / "train.yaml"), str(new / "train.yaml")])
    hits = [(f.file.rsplit("/", 2)[-2], f.severity) for f in report.findings if f.rule == "key-not-in-release"]
    assert hits == [("new", Severity.ERROR)]  # the first file's pins never answer for the second


def test_installed_releases_are_looked_up_once_per_view(monkeypatch, tmp_path):
    (tmp_path / "requirements.txt").write_text("trl==0.19.1\ntransformers==4.57.1\n")
    cfg = tmp_path / "sft.yaml"
    # an SFT file (dataset_text_field, packing are SFTConfig's) whose pins two rules read
    cfg.write_text("model_name_or_path: acme/tiny-7b\ndataset_text_field: text\npacking: true\n"
                   "completion_only_loss: true\nevaluation_strategy: steps\n")
    calls = []
    real = releases._installed
    monkeypatch.setattr(releases, "_installed", lambda ctx: calls.append(ctx.file) or real(ctx))
    report = api.lint([str(cfg)])
    assert not report.internal
    assert calls == [str(cfg)]
    rules = {f.rule for f in report.findings}
    assert "key-not-in-release" in rules  # evaluation_strategy on transformers 4.57.1


def test_a_not_checked_note_is_placed_as_any_finding_on_the_whole_document(tmp_path, monkeypatch):
    # the note's place (file, line, column, the composed note) is worked out once per view: it is
    # the place the engine gives any finding at the empty key path of that document
    from cfgcheck import engine

    first, second = _two_rules_with_thresholds()
    pairs = []

    def unsure(ctx):
        ctx.cannot_judge("nothing to go on")
        made = ctx._sink[-1]
        data = {"reason": "nothing to go on", "judged": False}
        pairs.append((made, engine._finding(made.rule, Severity.INFO, ctx.doc, ctx.file, (), "value",
                                            made.message, made.hint, data)))

    for rid in (first, second):
        monkeypatch.setitem(checks.all_checks(), rid, unsure)
    (tmp_path / "base.yaml").write_text("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\n")
    (tmp_path / "run.yaml").write_text("base_config: base.yaml\nwarmup_steps: 100\n")
    (tmp_path / "hydra.yaml").write_text("defaults:\n  - base\n  - _self_\nlearning_rate: 1.0e-4\n")
    (tmp_path / "two.yaml").write_text("learning_rate: 1.0e-5\n---\n\n\n  lora_r: 8\n")
    (tmp_path / "one.json").write_text('\n\n  {"learning_rate": 1e-5, "lora_r": 8}\n')
    for name in ("run.yaml", "hydra.yaml", "two.yaml", "one.json"):
        engine.lint_file(tmp_path / name, engine.Options())
    assert len(pairs) >= 10
    for made, expected in pairs:
        assert made == expected
        assert (made.file, made.line, made.column, made.key, made.data, made.document, made.message,
                made.hint) == (expected.file, expected.line, expected.column, expected.key,
                               expected.data, expected.document, expected.message, expected.hint)
    assert {made.document for made, _ in pairs} == {0, 1}
