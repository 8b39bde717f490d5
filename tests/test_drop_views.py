"""A report whose views are not kept lets go of them at once: a view and its opened run refer to
each other, and without the cut every linted file's documents, entries and positions would wait
for the cycle collector."""

from __future__ import annotations

import gc
from pathlib import Path

import pytest

from cfgcheck import engine, parallel
from cfgcheck.engine import Options
from cfgcheck.run import OpenedRun
from cfgcheck.view import RunView

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo"


@pytest.fixture
def collector_off():
    """The cycle collector stopped, and what it would free kept in ``gc.garbage`` to be read."""
    was_enabled, flags = gc.isenabled(), gc.get_debug()
    # a lint first, so that what the run-wide caches hold from earlier tests is let go and
    # collected here, not counted in the test
    list(engine.lint_files(_pairs(), keep_views=False))
    gc.collect()
    gc.disable()
    gc.set_debug(gc.DEBUG_SAVEALL)
    gc.garbage.clear()
    yield
    gc.set_debug(flags)
    gc.garbage.clear()
    if was_enabled:
        gc.enable()
    gc.collect()


def _cyclic_views() -> list[object]:
    """The views and opened runs only the cycle collector could free."""
    gc.collect()
    return [o for o in gc.garbage if isinstance(o, (RunView, OpenedRun))]


def _pairs() -> list[tuple[str, Options]]:
    files = sorted(str(p) for p in DEMO.iterdir())
    assert len(files) >= 4
    return [(f, Options()) for f in files]


def test_a_view_left_in_place_with_its_run_is_garbage_only_the_collector_frees(collector_off):
    # the cycle the cut exists for: without it, the views of a dropped report are cyclic garbage
    for path, opts in _pairs():
        report = engine.lint_file(path, opts)
        assert report.views and all(v.run is not None for v in report.views if not v.skipped)
        report.views = []
    assert _cyclic_views()


def test_dropped_views_are_freed_without_the_collector(collector_off):
    reports = list(engine.lint_files(_pairs(), keep_views=False))
    assert reports and all(not r.views for r in reports)
    assert any(r.findings for r in reports)  # the demo files were linted, with findings
    assert _cyclic_views() == []


def test_kept_views_keep_their_opened_run(collector_off):
    reports = list(engine.lint_files(_pairs(), keep_views=True))
    views = [v for r in reports for v in r.views if not v.skipped]
    assert views and all(isinstance(v.run, OpenedRun) for v in views)


def test_a_worker_strips_views_the_same_way(collector_off):
    path, opts = _pairs()[0]
    report = engine.lint_file(path, opts)
    views = list(report.views)
    assert views
    parallel._strip(report)
    assert report.views == [] and all(v.run is None for v in views)
    del views
    assert _cyclic_views() == []


def test_fixing_leaves_no_view_to_the_collector(collector_off):
    from cfgcheck import fix

    texts = [(p, p.read_text()) for p in sorted(DEMO.iterdir())]
    results = [fix.fix_text(text, str(p), Options()) for p, text in texts]
    assert any(r.applied for r in results)  # fixes were made and proven, with their re-lints
    assert _cyclic_views() == []


def test_views_are_cut_on_leaving_the_outermost_scope():
    text = (DEMO / "harborlight-support-lora.yaml").read_text()
    with engine.views_let_go():
        outer = engine.lint_text(text, "a.yaml")
        with engine.views_let_go():
            inner = engine.lint_text(text, "b.yaml")
        # the inner scope joined the outer one: both still open here
        assert all(v.run is not None for v in outer.views + inner.views)
    assert outer.views and inner.views  # the views stay in their reports, cut from their runs
    assert all(v.run is None for v in outer.views + inner.views)
    kept = engine.lint_text(text, "c.yaml")  # outside any scope: nothing is cut
    assert kept.views and all(isinstance(v.run, OpenedRun) for v in kept.views)


def test_deriving_leaves_no_view_to_the_collector(collector_off):
    from cfgcheck import api

    result = api.derive([str(DEMO)], project=None)
    assert result.runs and all(plan.memory_inputs is not None or plan.memory_problem
                               for _f, plan in result.runs)
    assert _cyclic_views() == []


def test_reading_json_leaves_nothing_to_the_collector(collector_off):
    # the position walk of a JSON text is a nested function that calls itself: its closure held
    # the function, and with it the text and the document's entries, in a cycle
    from cfgcheck import load

    text = '{"model": {"name": "x", "layers": [1, 2, {"r": 8}]}, "lr": 1e-4, "tags": ["a", "b"]}'
    doc = load.load_text(text, "a.json")[0]
    assert doc.entries[("model", "layers", 2, "r")].value.line == 1  # the walk ran and placed it
    del doc
    gc.collect()
    assert gc.garbage == []


def test_linting_a_folder_of_yaml_and_json_leaves_nothing_to_the_collector(collector_off, tmp_path):
    # every kind of object, not only views: what the collector would have to free after a lint
    (tmp_path / "run.yaml").write_text((DEMO / "harborlight-support-lora.yaml").read_text())
    (tmp_path / "ds.json").write_text('{"train_micro_batch_size_per_gpu": 4, '
                                      '"gradient_accumulation_steps": 2, "zero_optimization": {"stage": 2}}')
    pairs = [(str(p), Options()) for p in sorted(tmp_path.iterdir())] + _pairs()
    reports = list(engine.lint_files(pairs, keep_views=False))
    assert any(r.layout for r in reports[:2])
    del reports
    gc.collect()
    assert gc.garbage == []
