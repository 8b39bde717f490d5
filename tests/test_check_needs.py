"""What a check declares it needs (``@check(id, when=..., methods=...)``) is true: the engine
passes over a view that lacks it, and that changes nothing a lint says.

Three ways of holding each declaration to its promise:

* the names it uses are fields of the view that its own module reads, and methods a view has;
* linting the rule examples of the catalogue, the fixtures and the public corpus with and without
  the engine passing over views gives the same findings, notes, waived findings and errors;
* on every view of those inputs where a declared check says something, taking away what it
  declared it needs (each requirement's fields, or another method) leaves it saying nothing.
"""

from __future__ import annotations

import importlib
import inspect
from pathlib import Path

import pytest

from cfgcheck import api, engine
from cfgcheck._records import replaced
from cfgcheck.catalogue import load_catalogue
from cfgcheck.checks import ADAPTER, Needs, all_checks, declared
from cfgcheck.findings import FileReport
from cfgcheck.layouts import FIELD_TYPES, LAYOUTS, METHOD_WORDS

from .test_catalogue_reads import field_names_read

ROOT = Path(__file__).resolve().parents[1]
METHODS = (None, "full", "partial", "lora", "qlora")  # what view.method takes (view._infer_method)


def _needs() -> dict[str, Needs]:
    all_checks()
    return dict(declared())


def test_most_rules_declare_what_they_need():
    # the scan below covers real declarations: a change that dropped them all would pass it idly
    assert len(_needs()) >= 40
    assert _needs()["lora-rank-above-matrix-dim"].methods == frozenset(ADAPTER)


def test_every_declared_name_is_a_field_of_the_view_and_every_method_one_a_view_takes():
    catalogue = load_catalogue()
    for rule_id, need in _needs().items():
        assert rule_id in catalogue
        assert need.groups or need.methods is not None, rule_id
        unknown = need.fields - set(FIELD_TYPES)
        assert not unknown, f"{rule_id}: not fields of the view: {sorted(unknown)}"
        if need.methods is not None:
            assert need.methods <= set(METHODS), rule_id
            assert need.methods, f"{rule_id}: no method at all: the check could never run"
    # the methods a layout can give a view are the ones listed here
    given = {lay.default_method for lay in LAYOUTS} | {m for lay in LAYOUTS for m in lay.method_values.values()}
    given |= set(METHOD_WORDS.values())
    assert given <= set(METHODS)


def test_every_declared_field_is_one_the_check_reads():
    for rule_id, need in _needs().items():
        module = importlib.import_module(need.check.__module__)
        read = set(field_names_read(inspect.getsource(module)))
        assert need.fields <= read, f"{rule_id}: declares fields its module never reads: {sorted(need.fields - read)}"


def test_a_declared_check_is_passed_over_on_a_view_that_lacks_what_it_needs(monkeypatch):
    rule_id = "lora-rank-above-matrix-dim"
    calls = []

    def counting(ctx):
        calls.append(ctx.view.get("adapter.rank"))

    from cfgcheck import checks

    with_rank = "base_model: some-org/tiny\nadapter: lora\nlora_r: 8\nlearning_rate: 0.0002\nmicro_batch_size: 2\n"
    without = "base_model: some-org/tiny\nadapter: lora\nlearning_rate: 0.0002\nmicro_batch_size: 2\n"
    monkeypatch.setitem(checks._CHECKS_CACHE, rule_id, counting)
    opts = dict(only=[rule_id])
    # a replaced check (as here) declares nothing: it runs on every view
    api.lint_text(with_rank, "a.yaml", **opts)
    api.lint_text(without, "b.yaml", **opts)
    assert len(calls) == 2
    # declared for the function that runs: it runs only where the view has the rank, in an adapter run
    monkeypatch.setitem(checks._NEEDS_CACHE, rule_id, Needs(counting, (frozenset({"adapter.rank"}),),
                                                            frozenset(ADAPTER)))
    calls.clear()
    view = api.lint_text(with_rank, "a.yaml", **opts).views[0]
    api.lint_text(without, "b.yaml", **opts)
    assert [f.value for f in calls] == [8]
    options = api.make_options(**opts)
    engine.lint_view(replaced(view, method="full"), options, "a.yaml", FileReport(file="a.yaml"))
    assert len(calls) == 1
    engine.lint_view(replaced(view, run=None), options, "a.yaml", FileReport(file="a.yaml"))
    assert len(calls) == 2  # a view not opened yet: everything runs


# --------------------------------------------------------------------------- the inputs

def _example_runs():
    """(name, text, fmt, options, files beside it) of every rule example in the catalogue."""
    for rule_id, rule in sorted(load_catalogue().items()):
        for kind in ("bad", "good", "unjudged"):
            for i, ex in enumerate(rule.examples.get(kind, [])):
                yield f"{rule_id}-{kind}-{i}", ex


def _lint_example(ex, folder: Path) -> FileReport:
    fmt = ex.get("format")
    name = folder / ("example.json" if fmt == "json" else "example.yaml")
    folder.mkdir(parents=True)
    for other, text in (ex.get("files") or {}).items():
        (folder / other).write_text(text, encoding="utf-8")
    options = dict(ex.get("options") or {})
    if "launch" in options:
        options["launch"] = [str(folder / f) for f in options["launch"]]
    return api.lint_text(ex["text"], str(name), fmt=fmt, **options), options


def _file_inputs(shared: Path | None) -> list[Path]:
    roots = [ROOT / "fixtures"]
    public = shared / "corpus" / "public" if shared is not None else None
    if public is not None and public.is_dir():
        roots.append(public)
    return roots


def _said(report: FileReport):
    """Everything a lint says about a file, in a form two lints can be compared by."""
    return (report.problem, [(f, f.message, f.hint, f.data) for f in report.findings],
            [(f, reason, kind) for f, reason, kind in report.waived], report.internal,
            report.skipped, report.layout, report.compose_problem)


def _all_reports(tmp_path: Path, shared: Path | None, tag: str):
    out = {}
    for name, ex in _example_runs():
        report, options = _lint_example(ex, tmp_path / tag / name)
        out[name] = (report, options)
    for root in _file_inputs(shared):
        for report in engine.lint_paths([root], engine.Options()).files:
            out[report.file] = (report, {})
    return out


def _shared():
    from .conftest import SHARED

    return SHARED if SHARED.is_dir() else None


def test_passing_over_views_changes_nothing_a_lint_says(tmp_path, monkeypatch):
    shared = _shared()
    skipping = _all_reports(tmp_path, shared, "with")
    monkeypatch.setattr(engine, "declared", lambda: {})  # every check runs on every view
    running = _all_reports(tmp_path, shared, "without")
    assert len(skipping) > 300
    # the example folders differ by name only: compare each file's findings in its own folder
    for (name, (a, _)), (name2, (b, _)) in zip(sorted(skipping.items()), sorted(running.items())):
        assert name == name2
        if "/with/" in a.file:
            b_said = _said(b)
            a_said = _said(a)
            assert repr(a_said).replace("/with/", "/") == repr(b_said).replace("/without/", "/"), name
        else:
            assert _said(a) == _said(b), name
    # and the declarations were put to work: many views lacked what some check needs
    said = sum(len(r.findings) for r, _ in running.values())
    assert said > 500


def _said_by(view, rule_id: str, options, file: str, monkeypatch) -> list:
    """What RULE_ID says about VIEW, run on it whatever it declared."""
    with monkeypatch.context() as m:
        m.setattr(engine, "declared", lambda: {})
        report = FileReport(file=file)
        engine.lint_view(view, replaced(options, only=frozenset({rule_id})), file, report)
    return report.findings + report.internal


def test_taking_away_what_a_check_needs_leaves_it_nothing_to_say(tmp_path, monkeypatch):
    needs = _needs()
    shared = _shared()
    tried = 0
    for name, (report, options) in _all_reports(tmp_path, shared, "views").items():
        opts = api.make_options(**options) if options else engine.Options()
        by_rule = {f.rule for f in report.findings} | {f.rule for f, _r, _k in report.waived}
        for view in report.views:
            if view.skipped or view.run is None:
                continue
            for rule_id in sorted(by_rule & set(needs)):
                need = needs[rule_id]
                if not _said_by(view, rule_id, opts, report.file, monkeypatch):
                    continue  # another view of the file (a document, a linked config) said it
                for group in need.groups:
                    bare = replaced(view, fields={k: f for k, f in view.fields.items() if k not in group},
                                    supplied={k: f for k, f in view.supplied.items() if k not in group},
                                    model_found=None)
                    said = _said_by(bare, rule_id, opts, report.file, monkeypatch)
                    assert said == [], f"{name}: {rule_id} says something without any of {sorted(group)}"
                    tried += 1
                for method in METHODS:
                    if need.methods is not None and method not in need.methods:
                        other = replaced(view, method=method, model_found=None)
                        said = _said_by(other, rule_id, opts, report.file, monkeypatch)
                        assert said == [], f"{name}: {rule_id} says something about a {method} run"
                        tried += 1
    assert tried > 100


def test_the_tables_of_checks_and_declarations_count_every_change():
    from cfgcheck.checks import Table

    t = Table(a=1)
    assert t.version == 0 and t == {"a": 1}
    t["b"] = 2
    t.update(c=3)
    t.setdefault("d", 4)
    del t["a"]
    t.pop("b")
    t |= {"e": 5}
    t.popitem()
    t.clear()
    assert t.version == 8 and t == {}


def test_the_rules_passed_over_are_worked_out_again_when_a_check_or_a_declaration_changes(monkeypatch):
    # which rules run on a kind of view is kept between views: replacing a check or its
    # declaration (and putting them back) must be seen at once
    from cfgcheck import checks

    rule_id = "lora-rank-above-matrix-dim"
    without = "base_model: some-org/tiny\nadapter: lora\nlearning_rate: 0.0002\nmicro_batch_size: 2\n"
    opts = dict(only=[rule_id])
    calls = []

    def counting(ctx):
        calls.append(ctx.view.method)

    api.lint_text(without, "a.yaml", **opts)  # the kind of view seen once with the tables as they are
    with monkeypatch.context() as m:
        m.setitem(checks._CHECKS_CACHE, rule_id, counting)  # a replaced check declares nothing
        api.lint_text(without, "a.yaml", **opts)
        assert calls == ["lora"]
        m.setitem(checks._NEEDS_CACHE, rule_id, Needs(counting, (frozenset({"adapter.rank"}),), None))
        api.lint_text(without, "a.yaml", **opts)
        assert calls == ["lora"]  # declared for it: passed over on a view without the rank
        m.delitem(checks._NEEDS_CACHE, rule_id)
        api.lint_text(without, "a.yaml", **opts)
        assert calls == ["lora", "lora"]  # no declaration any more: it runs
    assert checks.registered()[rule_id] is not counting
    api.lint_text(without, "a.yaml", **opts)
    assert calls == ["lora", "lora"]  # the check as it was, passed over as before
