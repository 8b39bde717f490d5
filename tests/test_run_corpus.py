"""lint and plan open every public recipe the same way: same GPUs, sharding, steps and memory."""

from __future__ import annotations

import pytest

from cfgcheck import api
from cfgcheck.schedule import derive_for

ROWS = 20_000  # any row count: both sides get the same one


def _corpus(shared_dir):
    root = shared_dir / "corpus" / "public"
    if not root.is_dir():
        pytest.skip("no public corpus")
    return sorted(str(p) for p in root.iterdir() if p.suffix in (".yaml", ".yml", ".json"))


@pytest.mark.parametrize("context", [{}, {"gpus": 8},
                                     {"launch": ["alignment-handbook__recipes__accelerate_configs__zero3.yaml"]}],
                         ids=["no-context", "8-gpus", "zero3-launch-file"])
def test_lint_and_plan_agree_on_every_corpus_file(shared_dir, context):
    files = _corpus(shared_dir)
    root = shared_dir / "corpus" / "public"
    if "launch" in context:
        context = {"launch": [str(root / f) for f in context["launch"]]}
    lint = api.lint(files, project=None, gpu="t4", rows=ROWS,
                    thresholds={"memory-exceeds-gpu": {"warn_fraction": 0.0}}, **context)
    plans = api.derive(files, project=None, gpu="t4", rows=ROWS, **context)
    by_file: dict[str, list] = {}
    for file, plan in plans.runs:
        by_file.setdefault(file, []).append(plan)
    memory_compared = steps_compared = 0
    for fr in lint.files:
        views = [v for v in fr.views if not v.skipped]
        mine = by_file.get(fr.file, [])
        assert len(views) == len(mine), fr.file
        totals = sorted(f.data["total_bytes"] for f in fr.findings
                        if f.rule == "memory-exceeds-gpu" and "total_bytes" in f.data)
        assert totals == sorted(p.memory.total_bytes for p in mine if p.memory is not None), fr.file
        memory_compared += len(totals)
        for view, plan in zip(views, mine):
            run = view.run
            assert plan.schedule.gpus == max(1, run.gpus or 1), fr.file
            sched = derive_for(view, gpus=run.gpus, rows=ROWS)  # what lint's step rules derive
            assert sched.total_steps == plan.schedule.total_steps, fr.file
            assert sched.effective_batch == plan.schedule.effective_batch, fr.file
            if plan.memory_inputs is not None:
                assert plan.memory_inputs.sharding == run.sharding, fr.file
            steps_compared += sched.total_steps is not None
    assert memory_compared >= 20 and steps_compared >= 40  # most of the corpus is compared
