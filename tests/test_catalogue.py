"""The catalogue and the checks match one to one, and every catalogue example behaves as it says."""

from __future__ import annotations

import string

import pytest

from cfgcheck.catalogue import load_catalogue
from cfgcheck.checks import all_checks
from cfgcheck.findings import Severity

from .helpers import lint

CATALOGUE = load_catalogue()


def test_every_rule_has_a_check_and_every_check_a_rule():
    assert set(CATALOGUE) == set(all_checks())


@pytest.mark.parametrize("rule_id", sorted(CATALOGUE))
def test_record_is_complete(rule_id):
    rule = CATALOGUE[rule_id]
    assert rule.summary and rule.rationale and rule.sources
    assert rule.examples.get("bad") and rule.examples.get("good"), "a bad and a good example"
    for name, t in rule.thresholds.items():
        assert isinstance(t, dict) and "value" in t and t.get("source"), f"threshold {name} needs a value and a source"
    assert rule_id == rule_id.lower() and all(c in string.ascii_lowercase + string.digits + "-" for c in rule_id)


def _examples(kind):
    for rule_id, rule in sorted(CATALOGUE.items()):
        for i, ex in enumerate(rule.examples.get(kind, [])):
            yield pytest.param(rule_id, ex, id=f"{rule_id}-{kind}-{i}")


def _run(ex, folder=None):
    """Lint an example: its text, with the files it names (``files:``) written beside it."""
    fmt = ex.get("format")
    name = "example.json" if fmt == "json" else "example.yaml"
    if ex.get("files"):
        import tempfile
        from pathlib import Path

        folder = Path(folder or tempfile.mkdtemp(prefix="cfgcheck-example-"))
        for other, text in ex["files"].items():
            (folder / other).write_text(text, encoding="utf-8")
        name = str(folder / name)
    options = dict(ex.get("options") or {})
    if "launch" in options:  # launch files are among the files written beside the example
        options["launch"] = [str(folder / f) for f in options["launch"]]
    report = lint(ex["text"], name, fmt, **options)
    assert report.problem is None, report.problem
    assert not report.internal, report.internal
    return report


@pytest.mark.parametrize("rule_id,ex", list(_examples("bad")))
def test_bad_example_fires_at_its_key(rule_id, ex):
    report = _run(ex)
    if "severity" in ex:  # an example of an info-level finding (or of a variant's own level)
        want = Severity.parse(ex["severity"])
        hits = [f for f in report.findings if f.rule == rule_id and f.severity == want]
    else:
        hits = [f for f in report.findings if f.rule == rule_id and f.severity >= Severity.WARNING]
    assert hits, f"{rule_id} did not fire on its bad example"
    assert ex["at"] in {f.key for f in hits}
    for f in hits:
        assert f.line >= 1 and f.column >= 1
        assert f.message and f.hint


@pytest.mark.parametrize("rule_id,ex", list(_examples("good")))
def test_good_example_is_silent(rule_id, ex):
    report = _run(ex)
    assert [f for f in report.findings if f.rule == rule_id and f.severity >= Severity.WARNING] == []
    # a rule whose findings are info-level is silent on its good example at every level
    # (a "could not judge" note is not a finding about the example)
    if CATALOGUE[rule_id].severity == Severity.INFO:
        assert [f for f in report.findings if f.rule == rule_id and f.data.get("judged") is not False] == []


@pytest.mark.parametrize("rule_id,ex", list(_examples("unjudged")))
def test_unjudged_example_says_it_could_not_judge(rule_id, ex):
    report = _run(ex)
    notes = [f for f in report.findings if f.rule == rule_id and f.data.get("judged") is False]
    assert notes, f"{rule_id} gave no 'not checked' note on its unjudged example"
    assert all(f.severity == Severity.INFO for f in notes)


def _variants_and_tiers(rule_id):
    """The message variants and fix tiers a rule's examples produce."""
    variants, tiers = set(), set()
    for kind in ("bad", "good", "unjudged"):
        for ex in CATALOGUE[rule_id].examples.get(kind, []):
            for f in _run(ex).findings:
                if f.rule != rule_id:
                    continue
                variants.add("cannot-judge" if f.data.get("judged") is False
                             else f.data.get("variant", "default"))
                if f.fix is not None:
                    tiers.add(f.fix.tier)
    return variants, tiers


@pytest.mark.parametrize("rule_id", sorted(CATALOGUE))
def test_every_message_variant_is_shown_by_an_example(rule_id):
    variants, _ = _variants_and_tiers(rule_id)
    assert set(CATALOGUE[rule_id].messages) - variants == set(), \
        "add a bad (or unjudged) example that produces each of these messages"


@pytest.mark.parametrize("rule_id", sorted(CATALOGUE))
def test_fix_in_the_record_matches_the_fixes_the_check_proposes(rule_id):
    """A record has ``fix:`` exactly when its check proposes fixes, and of the tier it names."""
    _, tiers = _variants_and_tiers(rule_id)
    record = CATALOGUE[rule_id].fix
    if record is None:
        assert tiers == set(), f"{rule_id} proposes {tiers} fixes but its record has no fix:"
    else:
        assert record.get("tier") in ("keeps-meaning", "changes-training") and record.get("summary")
        assert tiers == {record["tier"]}, f"the record says {record['tier']}, the examples give {tiers or 'none'}"


def _fix(rule_id, ex):
    """Fix an example (with the files it names beside it) for this rule only; nothing is written."""
    import tempfile
    from pathlib import Path

    from cfgcheck import api

    folder = Path(tempfile.mkdtemp(prefix="cfgcheck-example-"))
    for other, text in (ex.get("files") or {}).items():
        (folder / other).write_text(text, encoding="utf-8")
    name = folder / ("example.json" if ex.get("format") == "json" else "example.yaml")
    name.write_text(ex["text"], encoding="utf-8")
    options = dict(ex.get("options") or {})
    if "launch" in options:
        options["launch"] = [str(folder / f) for f in options["launch"]]
    training = (CATALOGUE[rule_id].fix or {}).get("tier") == "changes-training"
    report = api.fix([str(name)], training=training, write=False, project=None, only=[rule_id], **options)
    return report.files[0]


@pytest.mark.parametrize("rule_id,ex", list(_examples("bad")))
def test_a_bad_example_that_gets_a_fix_states_the_fixed_text(rule_id, ex):
    """``fixed:`` on a bad example is the text the fixer writes, by this rule's fixes alone and of
    the record's tier; a bad example whose finding carries a fix must say it."""
    proposes = any(f.rule == rule_id and f.fix is not None for f in _run(ex).findings)
    if "fixed" not in ex:
        assert not proposes, f"{rule_id}: the finding carries a fix: add fixed: (the text after fixing)"
        return
    tier = (CATALOGUE[rule_id].fix or {}).get("tier")
    assert tier, f"{rule_id}: an example states fixed: but the record has no fix:"
    result = _fix(rule_id, ex)
    assert result.problem is None and result.error is None, (result.problem, result.error)
    assert {(a.rule, a.tier) for a in result.applied} == {(rule_id, tier)}
    assert result.new_text != ex["text"]
    assert result.new_text == ex["fixed"]


@pytest.mark.parametrize("rule_id", sorted(CATALOGUE))
def test_a_fix_in_the_record_is_shown_with_its_output(rule_id):
    """``fix:`` in a record exactly when some bad example states the fixed text."""
    shown = any("fixed" in ex for ex in CATALOGUE[rule_id].examples.get("bad", []))
    assert shown == (CATALOGUE[rule_id].fix is not None), \
        "a record with fix: needs a bad example with fixed:, and only such a record may have one"
    for kind in ("good", "unjudged"):
        assert not any("fixed" in ex for ex in CATALOGUE[rule_id].examples.get(kind, [])), \
            f"fixed: belongs on bad examples only, not {kind}"


def test_generated_docs_tables_are_current():
    import importlib.util
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "tools" / "docs_tables.py"
    spec = importlib.util.spec_from_file_location("docs_tables", path)
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    assert tool.main(["--check"]) == 0, "run: python tools/docs_tables.py"
