"""The JSON Schema of the typed view, checked with jsonschema (the reference validator), and the
hand checks that ``lint`` runs instead, which must agree with it."""

from __future__ import annotations

import json

import jsonschema
import pytest
from typer.testing import CliRunner

from cfgcheck import schema as sch
from cfgcheck.cli import app
from cfgcheck.layouts import FIELD_TYPES, LAYOUTS

from .helpers import found


def test_view_schema_is_a_valid_draft_2020_12_schema():
    jsonschema.Draft202012Validator.check_schema(sch.view_schema())


@pytest.mark.parametrize("layout", [lay.name for lay in LAYOUTS])
def test_layout_schemas_are_valid(layout):
    jsonschema.Draft202012Validator.check_schema(sch.layout_schema(layout))


SAMPLES = [-2, -1, 0, 0.05, 0.5, 0.999, 1, 1.0, 1.5, 2, 3, 4, 8, 16, 512, 2.0e-5,
           "cosine", "cosin", "nf4", "fp4", "none", "steps", "epoch", "best", "FSDP", "bf16", "WarmupLR"]


def _typed(name, value):
    kind = FIELD_TYPES[name]
    if kind == "int":
        return isinstance(value, int) and not isinstance(value, bool)
    if kind == "number":
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if kind == "str":
        return isinstance(value, str)
    return False


@pytest.mark.parametrize("layout", [None] + [lay.name for lay in LAYOUTS])
def test_hand_checks_agree_with_jsonschema(layout):
    checked = 0
    for name in sch.CONSTRAINTS:
        for value in SAMPLES:
            if not _typed(name, value):
                continue
            by_hand = sch.violations(name, value, layout)
            if layout is None:
                by_hand = [v for v in by_hand if v.problem != "not-one-of"]
                if any(c.enum and c.word_list is None for c in sch.CONSTRAINTS[name]):
                    by_hand = sch.violations(name, value, None)
            errors = sch.validate_with_jsonschema({name: value}, layout)
            assert bool(by_hand) == bool(errors), (name, value, layout, by_hand, errors)
            checked += 1
    assert checked > 100


def test_known_bounds():
    # torch.nn.Dropout: p in [0, 1); PEFT LoraConfig: r > 0; DeepSpeed ZeRO stages 0-3
    assert sch.violations("adapter.dropout", 1.0, "trainer")[0].problem == "at-or-above"
    assert sch.violations("adapter.dropout", 0.0, "trainer") == []
    assert sch.violations("adapter.rank", 0, "trainer")[0].problem == "below"
    assert sch.violations("runtime.zero_stage", 4, "deepspeed")[0].problem == "not-one-of"
    # transformers SchedulerType has no "cosin"; DeepSpeed schedulers are not checked in trainer files
    assert sch.violations("optim.scheduler", "cosin", "trainer")
    assert sch.violations("optim.scheduler", "WarmupLR", "trainer")
    assert sch.violations("optim.scheduler", "WarmupLR", "deepspeed") == []
    assert sch.violations("optim.scheduler", "one_cycle", "axolotl") == []  # axolotl has its own list


def test_scheduler_and_strategy_lists_match_installed_transformers():
    trainer_utils = pytest.importorskip("transformers.trainer_utils")
    assert set(sch.HF_SCHEDULERS) >= {s.value for s in trainer_utils.SchedulerType}
    assert set(sch.EVAL_STRATEGIES) == {s.value for s in trainer_utils.IntervalStrategy}
    assert set(sch.SAVE_STRATEGIES) == {s.value for s in trainer_utils.SaveStrategy}
    training_args = pytest.importorskip("transformers.training_args")
    assert set(sch.HF_OPTIMIZERS) >= {o.value for o in training_args.OptimizerNames}


def test_lint_reports_out_of_range_values_at_their_key():
    assert ("value-outside-schema", "lora_dropout") in found("use_peft: true\nlora_r: 8\nlora_dropout: 1.0\n")
    assert found("use_peft: true\nlora_r: 8\nlora_dropout: 0.1\nlr_scheduler_type: cosine\n") == []


def test_cli_prints_the_schema():
    runner = CliRunner()
    out = runner.invoke(app, ["schema"])
    assert out.exit_code == 0
    data = json.loads(out.stdout)
    assert data["properties"]["adapter.dropout"]["anyOf"][0] == {
        "type": "number", "minimum": 0, "exclusiveMaximum": 1}
    out = runner.invoke(app, ["schema", "--layout", "torchtune"])
    assert out.exit_code == 0
    assert "lora_rank" in json.loads(out.stdout)["properties"]["model"]["properties"]
    out = runner.invoke(app, ["schema", "--layout", "nope"])
    assert out.exit_code == 2


def test_corpus_views_validate(shared_dir):
    from cfgcheck.load import LoadError, load_text, read_source
    from cfgcheck.view import build_view

    corpus = shared_dir / "corpus" / "public"
    n = 0
    for path in sorted(corpus.iterdir()):
        if path.suffix not in (".json", ".yaml", ".yml"):
            continue
        try:
            doc = load_text(read_source(path).text, str(path))[0]
        except LoadError:
            continue
        view = build_view(doc)
        values = {k: f.value for k, f in view.fields.items() if f.value is not None and not f.auto}
        assert sch.validate_with_jsonschema(values, view.layout.name) == [], path.name
        n += 1
    assert n == 117  # every readable config of the corpus
