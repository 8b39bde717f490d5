"""Launch scripts written the ways real shell scripts are: loops over settings, bash arrays of
arguments, values only the launch knows, defaults the script gives its variables, launchers
wrapped in functions, here-documents. Each invented script (the Quillfeather lab's runs) has its
expected findings (rule id and line), and a clean variant gives no error or warning."""

from __future__ import annotations

import textwrap

import pytest

from cfgcheck import api
from cfgcheck.findings import Severity
from cfgcheck.scripts import parse_script

MODEL = "meta-llama/Llama-2-7b-hf"  # a 6.7B model in the bundled catalogue (Llama 2 paper, table 1)


def _lint(tmp_path, text, name="run.sh"):
    script = tmp_path / name
    script.write_text(textwrap.dedent(text))
    return api.lint([str(script)], project=None)


def _found(report):
    """(rule, line) of each error and warning, sorted; the script was read and linted."""
    assert report.problems == [] and not any(fr.internal for fr in report.files)
    assert any(fr.layout == "launch script" and fr.views for fr in report.files)
    return sorted((f.rule, f.line) for f in report.findings
                  if f.severity in (Severity.ERROR, Severity.WARNING))


# a full fine-tune of a 7B model: above about 5e-5 the learning-rate rule warns
# (common practice, no source: the project's own full-fine-tune ceiling for 3-20B models)
LOOP = f"""\
#!/usr/bin/env bash
set -euo pipefail
for LR in 1e-5 2e-5 5e-3; do
  torchrun --nproc_per_node 8 train.py --model_name_or_path {MODEL} \\
    --learning_rate $LR --num_train_epochs 2 --output_dir out/lr_$LR
done
"""


def test_a_loop_variable_takes_each_word_and_the_failing_round_is_named_at_its_word(tmp_path):
    report = _lint(tmp_path, LOOP)
    assert _found(report) == [("full-finetune-lr-too-high", 3)]
    (f,) = [f for f in report.findings if f.rule == "full-finetune-lr-too-high"]
    assert f.column == LOOP.splitlines()[2].index("5e-3") + 1  # the loop's own word
    assert "1 of 3 runs" in f.data["sweep"] and "LR=5e-3" in f.data["sweep"]
    assert not [f for f in report.findings if f.rule == "value-type-mismatch"]


def test_a_clean_loop_gives_no_error_or_warning(tmp_path):
    assert _found(_lint(tmp_path, LOOP.replace("5e-3", "3e-5"))) == []


def test_a_loop_over_an_array_and_nested_loops_give_every_combination(tmp_path):
    text = f"""\
    RATES=(2e-5 8e-3)
    for LR in "${{RATES[@]}}"; do
      for EP in 1 two; do
        python train.py --model_name_or_path {MODEL} --learning_rate $LR --num_train_epochs $EP
      done
    done
    """
    launches = parse_script(textwrap.dedent(text), str(tmp_path / "grid.sh"))
    assert [sl.run for sl in launches] == ["LR=2e-5, EP=1", "LR=2e-5, EP=two", "LR=8e-3, EP=1", "LR=8e-3, EP=two"]
    report = _lint(tmp_path, text)
    # the rate is written in the array (line 1), the epochs in the inner loop (line 3)
    assert _found(report) == [("full-finetune-lr-too-high", 1), ("value-type-mismatch", 3)]


UNKNOWN = f"""\
#!/bin/bash
set -e
source ./cluster_env.sh
STAMP=$(date +%s)
torchrun --nproc_per_node $NGPU train.py --model_name_or_path {MODEL} \\
  --learning_rate $1 --num_train_epochs $EPOCHS --seed $((RANDOM % 100)) \\
  --warmup_steps "${{WARMUP}}" --run_name job_$STAMP --max_steps `cat steps.txt` \\
  --weight_decay ${{WD/x/y}} --per_device_train_batch_size "$@"
"""


def test_values_only_the_launch_knows_are_not_written_values(tmp_path):
    (sl,) = parse_script(UNKNOWN, str(tmp_path / "run.sh"))
    unknown = {a.key for a in sl.args if a.unresolved}
    assert unknown == {"learning_rate", "num_train_epochs", "seed", "warmup_steps", "run_name",
                       "max_steps", "weight_decay", "per_device_train_batch_size"}
    report = _lint(tmp_path, UNKNOWN)
    assert _found(report) == []
    assert not [f for f in report.findings if f.rule == "value-type-mismatch"]


def test_a_default_the_script_gives_is_used_but_only_as_an_assumption(tmp_path):
    text = f"""\
    EPOCHS=${{EPOCHS:-three}}
    accelerate launch --config_file acc.yaml train.py --model_name_or_path {MODEL} \\
      --num_train_epochs $EPOCHS --learning_rate ${{LR:-2e-5}}
    """
    report = _lint(tmp_path, text)
    (f,) = [f for f in report.findings if f.rule == "value-type-mismatch"]
    # written, this is an error; as a default the environment may replace, at most a warning
    assert f.severity == Severity.WARNING and f.line == 3 and "default the script gives" in f.message
    assert _found(report) == [("value-type-mismatch", 3)]
    assert _found(_lint(tmp_path, text.replace("three", "3"))) == []


ARRAY = f"""\
#!/bin/bash
ARGS=(
  --model_name_or_path {MODEL}
  --learning_rate 2e-5   # the lab's usual rate
  --num_train_epochs "3"
)
ARGS+=(--per_device_train_batch_size four)
torchrun --nproc_per_node 4 train.py "${{ARGS[@]}}" --bf16
"""


def test_array_arguments_are_read_and_located_at_their_element(tmp_path):
    (sl,) = parse_script(ARRAY, str(tmp_path / "run.sh"))
    args = {a.key: a for a in sl.args}
    assert args["learning_rate"].value == 2e-5 and args["learning_rate"].value_span.line == 4
    assert args["num_train_epochs"].value == 3 and args["bf16"].value is True
    report = _lint(tmp_path, ARRAY)
    assert report.problems == []
    assert _found(report) == [("value-type-mismatch", 7)]
    (f,) = [f for f in report.findings if f.rule == "value-type-mismatch"]
    assert f.column == ARRAY.splitlines()[6].index("four") + 1


def test_a_clean_array_script_gives_no_error_or_warning(tmp_path):
    assert _found(_lint(tmp_path, ARRAY.replace("four", "4"))) == []


WRAPPED = f"""\
#!/usr/bin/env bash
set -euo pipefail
export LR=5e-3
cat > run_notes.txt <<'NOTE'
learning rate sweep: --learning_rate $(( broken ( ))
NOTE
if [[ -n "${{SLURM_JOB_ID:-}}" && $NODES -gt 1 ]]; then echo multi-node; fi
start() {{
  python -m torch.distributed.run --nproc_per_node 8 train.py \\
    --model_name_or_path {MODEL} \\
    --learning_rate "$LR" \\
    --num_train_epochs 1 --seed "$1"
}}
start 11
deepspeed --num_gpus 8 sft.py --deepspeed ds.json --model_name_or_path {MODEL} --learning_rate 2e-5 --num_train_epochs x
"""


def test_exports_here_documents_tests_and_wrapping_functions_are_read(tmp_path):
    launches = parse_script(WRAPPED, str(tmp_path / "run.sh"))
    assert [(sl.launcher, sl.line, sl.processes) for sl in launches] == [
        ("torchrun", 9, 8), ("deepspeed launcher", 15, 8)]
    assert launches[1].launch_files == (str(tmp_path / "ds.json"),)
    report = _lint(tmp_path, WRAPPED)
    assert report.problems == []
    # export LR=5e-3 is the rate of the wrapped launch (line 11); 'x' epochs at line 15
    assert _found(report) == [("full-finetune-lr-too-high", 11), ("value-type-mismatch", 15)]
    clean = WRAPPED.replace("LR=5e-3", "LR=2e-5").replace("--num_train_epochs x", "--num_train_epochs 2")
    assert _found(_lint(tmp_path, clean)) == []


def test_accelerate_launch_file_and_continuations(tmp_path):
    (tmp_path / "acc.yaml").write_text("distributed_type: MULTI_GPU\nnum_processes: 4\nmixed_precision: bf16\n")
    text = f"""\
    LR=2e-5 \\
      EP=2
    accelerate launch --config_file acc.yaml \\
      train.py --model_name_or_path {MODEL} \\
      --learning_rate $LR --num_train_epochs $EP --bf16
    """
    (sl,) = parse_script(textwrap.dedent(text), str(tmp_path / "run.sh"))
    assert sl.launch_files == (str(tmp_path / "acc.yaml"),) and sl.program == "train.py"
    assert {a.key: a.value for a in sl.args}["num_train_epochs"] == 2
    assert _found(_lint(tmp_path, text)) == []


def test_a_construct_the_reader_does_not_follow_is_named_not_read(tmp_path):
    from cfgcheck.render.text import summary_line

    text = f"""\
    case "$1" in
      big) LR=1e-5 ;;
      *) LR=2e-5 ;;
    esac
    torchrun train.py --model_name_or_path {MODEL} --learning_rate $LR
    """
    report = _lint(tmp_path, text, "pick.sh")
    (fr,) = report.files
    assert fr.problem is None and fr.skipped.startswith("not read: ") and "case statement" in fr.skipped
    assert report.findings == [] and report.problems == []
    assert "1 not read (" in summary_line(report) and "pick.sh" in summary_line(report)


@pytest.mark.parametrize("form, what", [
    ("for ((i = 0; i < 3; i++)); do\n  echo $i\ndone\n", "C-style for loop"),
    ("select size in small big; do\n  break\ndone\n", "select command"),
])
def test_valid_bash_the_parser_rejects_is_named_not_read_never_an_input_error(tmp_path, form, what):
    # bash runs both forms (bash manual, "Looping Constructs"); bashlex raises a syntax error
    text = form + f"torchrun train.py --model_name_or_path {MODEL} --learning_rate 2e-5\n"
    report = _lint(tmp_path, text, "count.sh")
    (fr,) = report.files
    assert fr.problem is None and report.problems == []
    assert fr.skipped.startswith("not read: ") and what in fr.skipped


def test_a_real_syntax_error_stays_an_input_error_with_its_position(tmp_path):
    report = _lint(tmp_path, f"torchrun train.py --model_name_or_path {MODEL} (\n", "broken.sh")
    (fr,) = report.files
    assert fr.problem is not None and fr.problem.line == 1 and fr.problem.column > 1


@pytest.mark.parametrize("text", ["ARGS=(--learning_rate 2e-5\n", "for x in a b; do\n"])
def test_an_unfinished_script_is_an_input_error_or_not_read_never_a_crash(tmp_path, text):
    report = _lint(tmp_path, text, "cut.sh")
    (fr,) = report.files
    assert not fr.internal
    assert (fr.problem is not None and fr.problem.line >= 1) or fr.skipped.startswith("not read: ")


def test_a_loop_over_the_arguments_that_override_a_config_lints_each_round_over_it(tmp_path):
    (tmp_path / "cfg.yaml").write_text(f"model_name_or_path: {MODEL}\nlearning_rate: 2.0e-5\nnum_train_epochs: 1\n")
    text = """\
    for LR in 1e-5 5e-3; do
      trl sft --config cfg.yaml --learning_rate $LR --num_train_epochs ${EP:-x}
    done
    """
    script = tmp_path / "go.sh"
    script.write_text(textwrap.dedent(text))
    report = api.lint([str(tmp_path)], project=None)
    assert _found(report) == [("full-finetune-lr-too-high", 1), ("value-type-mismatch", 2)]
    lr, ep = sorted((f for f in report.findings if f.severity != Severity.INFO), key=lambda f: f.line)
    assert lr.file == str(script) and "LR=5e-3" in lr.data["sweep"]
    assert ep.severity == Severity.WARNING and "every run" in ep.data["sweep"]


def test_a_long_loop_lints_as_many_rounds_as_a_sweep_with_both_ends(tmp_path):
    from cfgcheck.scripts import MAX_ROUNDS
    from cfgcheck.sweep import MAX_RUNS

    assert MAX_ROUNDS == MAX_RUNS
    seeds = " ".join(str(s) for s in range(100))
    text = f"for S in {seeds}; do\n  python train.py --model_name_or_path {MODEL} --seed $S\ndone\n"
    launches = parse_script(text, str(tmp_path / "seeds.sh"))
    assert len(launches) == MAX_ROUNDS
    assert launches[0].run == "S=0" and launches[-1].run == "S=99"


def test_shell_fragments_keep_every_offset_and_end_in_a_read_or_a_positioned_reason():
    import random

    from cfgcheck.load import LoadError
    from cfgcheck.scripts import ScriptNotRead, _prepare

    pieces = list("ab XY=()[]{}$'\"`\\#;&|<>-\n\t01") + [
        "$((", "[[ ", " ]]", "<<EOF\n", "\nEOF\n", "A=(", "A+=(", "for x in ", "; do ", "done",
        "torchrun t.py --learning_rate ", "${A[@]}", "${X:-1}", "case a in a) ;; esac\n"]
    rng = random.Random(3)  # a fixed seed: the same fragments every run
    for _ in range(300):
        text = "".join(rng.choice(pieces) for _ in range(rng.randrange(1, 80)))
        try:
            prepared, _arrays = _prepare(text)
        except Exception as exc:  # only an unclosed array stops the preparation
            assert "not closed" in str(exc), text
            prepared = text
        assert len(prepared) == len(text) and prepared.count("\n") == text.count("\n"), text
        try:
            parse_script(text, "/nowhere/frag.sh")
        except ScriptNotRead as exc:
            assert exc.reason
        except LoadError as exc:
            assert exc.line >= 0 and exc.reason


def test_array_elements_in_a_function_take_variables_and_leave_launch_values_unknown(tmp_path):
    text = ("LR=3e-5\ngo() {\n"
            "  local -a ARGS=(--learning_rate \"$LR\" --seed $1 --run_name 'tide b' --tag $(date +%s))\n"
            "  ARGS+=(--num_train_epochs $((1+1)))\n  torchrun train.py ${ARGS[*]}\n}\ngo\n")
    (sl,) = parse_script(text, str(tmp_path / "fn.sh"))
    got = {a.key: (a.value, a.unresolved, a.value_span.line) for a in sl.args}
    assert got["learning_rate"] == (3e-5, False, 3) and got["run_name"] == ("tide b", False, 3)
    assert got["seed"][1] and got["tag"][1] and got["num_train_epochs"][1:] == (True, 4)
