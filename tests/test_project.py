"""Project configuration: finding it, validating it (jsonschema, with positions), and what it
changes: which files are linted, rules, severities, thresholds and per-path hardware profiles."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from typer.testing import CliRunner

from cfgcheck import api
from cfgcheck import project as projectmod
from cfgcheck.cli import app
from cfgcheck.findings import Severity
from cfgcheck.project import ProjectError, compile_glob

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()

# A bf16 run: fine on an A100 (compute capability 8.0), not on a T4 (7.5).
# NVIDIA CUDA GPU compute capability table; bf16 needs 8.0 (NVIDIA Transformer Engine support matrix).
BF16_RUN = "model_name_or_path: tidewater/base-1b\nlearning_rate: 2.0e-5\nbf16: true\n"


def make_repo(tmp_path: Path, config: str, name: str = "cfgcheck.yaml") -> Path:
    (tmp_path / ".git").mkdir()
    (tmp_path / name).write_text(textwrap.dedent(config))
    return tmp_path


def rules_in(report):
    return sorted({f.rule for f in report.findings if f.severity >= Severity.WARNING})


def test_glob_rules():
    # '*' stays in a folder, '**' spans folders (common practice for path globs, e.g. .gitignore)
    assert compile_glob("runs/a100/**").match("runs/a100/x/y.yaml")
    assert compile_glob("runs/*.yaml").match("runs/a.yaml")
    assert not compile_glob("runs/*.yaml").match("runs/sub/a.yaml")
    assert compile_glob("**/*.json").match("a.json") and compile_glob("**/*.json").match("x/y/a.json")
    assert compile_glob("runs/t4/").match("runs/t4/a.yaml")
    assert compile_glob("r?ns/[ab].yaml").match("runs/a.yaml") and not compile_glob("r?ns/[ab].yaml").match("runs/c.yaml")


def test_hardware_profile_changes_findings_without_flags(tmp_path):
    repo = make_repo(tmp_path, """\
        profiles:
          - paths: runs/t4/**
            gpu: t4
          - paths: ["runs/a100/**"]
            gpu: a100-80gb
            gpus: 8
        """)
    for card in ("t4", "a100"):
        (repo / "runs" / card).mkdir(parents=True)
        (repo / "runs" / card / "train.yaml").write_text(BF16_RUN)
    report = api.lint([repo / "runs"])
    by_file = {Path(fr.file).parent.name: {f.rule for f in fr.findings if f.severity >= Severity.WARNING}
               for fr in report.files}
    assert "precision-unsupported-on-gpu" in by_file["t4"]
    assert "precision-unsupported-on-gpu" not in by_file["a100"]
    # without the project file the rule cannot judge (no GPU): info only
    plain = api.lint([repo / "runs"], project=None)
    assert "precision-unsupported-on-gpu" not in rules_in(plain)
    # a flag overrides the profile
    flagged = api.lint([repo / "runs" / "t4"], gpu="a100-80gb")
    assert "precision-unsupported-on-gpu" not in rules_in(flagged)


def test_profile_gpu_count_reaches_the_batch_rule(tmp_path):
    repo = make_repo(tmp_path, "profiles:\n  - paths: ds/**\n    gpus: 8\n")
    (repo / "ds").mkdir()
    # DeepSpeed configuration docs: train_batch_size = micro batch x accumulation x GPUs: 4 x 2 x 8 = 64
    (repo / "ds" / "z2.json").write_text('{"train_batch_size": 32, "train_micro_batch_size_per_gpu": 4,'
                                         ' "gradient_accumulation_steps": 2, "zero_optimization": {"stage": 2}}')
    report = api.lint([repo / "ds"])
    (f,) = [f for f in report.findings if f.rule == "global-batch-mismatch"]
    assert f.data["expected"] == 64 and f.data["gpus"] == 8
    ok = api.lint([repo / "ds"], gpus=4)  # 4 x 2 x 4 = 32: the flag wins
    assert "global-batch-mismatch" not in rules_in(ok)


def test_rules_severity_and_thresholds(tmp_path):
    repo = make_repo(tmp_path, """\
        rules:
          skip: [yaml-version-dependent-value]
        severity:
          lora-scale-below-one: error
        thresholds:
          lora-scale-below-one:
            min_scale: 0.25
        """)
    cfg = repo / "lora.yaml"
    cfg.write_text("use_peft: true\nlora_r: 16\nlora_alpha: 2\nlearning_rate: 2e-4\n")
    report = api.lint([cfg])
    # alpha/r = 2/16 = 0.125 < 0.25 (LoRA paper sec. 4.1: scale alpha/r)
    (f,) = [f for f in report.findings if f.rule == "lora-scale-below-one"]
    assert f.severity is Severity.ERROR and f.data["scale"] == 0.125
    assert "yaml-version-dependent-value" not in {f.rule for f in report.findings}
    cfg.write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")  # 0.5 >= 0.25: silent now
    assert "lora-scale-below-one" not in rules_in(api.lint([cfg]))
    assert "lora-scale-below-one" in rules_in(api.lint([cfg], project=None))


def test_configs_globs_choose_the_files(tmp_path):
    repo = make_repo(tmp_path, "configs: ['train/**/*.yaml']\nexclude: ['train/old/**']\n")
    for rel in ("train/a.yaml", "train/old/b.yaml", "docs/c.yaml"):
        (repo / rel).parent.mkdir(parents=True, exist_ok=True)
        (repo / rel).write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    report = api.lint([repo])
    assert [Path(fr.file).relative_to(repo).as_posix() for fr in report.files] == ["train/a.yaml"]
    # a file named explicitly but outside the globs is listed as skipped, with the reason
    report = api.lint([repo / "docs" / "c.yaml"])
    assert report.files[0].skipped and "configs globs" in report.files[0].skipped
    # no paths: the CLI lints the project's configs from its root
    r = runner.invoke(app, ["lint", "--project", str(repo / "cfgcheck.yaml"), str(repo)])
    assert r.exit_code == 1 and "train/a.yaml" in r.output and "docs/c.yaml" not in r.output


def test_discovery_walks_up_and_stops_at_the_repo_root(tmp_path):
    (tmp_path / "cfgcheck.yaml").write_text("gate: error\n")  # above the repository: not used
    repo = tmp_path / "repo"
    (repo / ".git").mkdir(parents=True)
    deep = repo / "a" / "b"
    deep.mkdir(parents=True)
    assert projectmod.find_file(deep) is None
    (repo / "cfgcheck.yaml").write_text("gate: error\n")
    assert projectmod.find_file(deep) == repo / "cfgcheck.yaml"
    assert projectmod.find_file(deep / "x.yaml") == repo / "cfgcheck.yaml"


def test_pyproject_table(tmp_path):
    pytest.importorskip("tomllib", reason="tomllib is Python 3.11+")
    repo = make_repo(tmp_path, """\
        [project]
        name = "tidewater-training"

        [tool.cfgcheck]
        gate = "error"

        [tool.cfgcheck.severity]
        "lora-scale-below-one" = "error"

        [[tool.cfgcheck.profiles]]
        paths = "runs/t4/**"
        gpu = "t4"
        """, name="pyproject.toml")
    proj = projectmod.discover([repo])
    assert proj.source.name == "pyproject.toml" and proj.gate is Severity.ERROR
    assert proj.severity == {"lora-scale-below-one": Severity.ERROR}
    assert proj.profiles[0].gpu.name == "t4"


def test_pyproject_without_our_table_is_not_a_project(tmp_path):
    make_repo(tmp_path, "[project]\nname = 'x'\n[tool.other]\ncfgcheck = 1\n", name="pyproject.toml")
    assert projectmod.find_file(tmp_path) is None


def test_pyproject_on_python_without_tomllib(tmp_path, monkeypatch):
    repo = make_repo(tmp_path, "[tool.cfgcheck]\ngate = 'error'\n", name="pyproject.toml")
    monkeypatch.setitem(sys.modules, "tomllib", None)  # as on Python 3.10
    with pytest.raises(ProjectError) as exc:
        projectmod.discover([repo])
    assert "Python 3.11" in str(exc.value) and "cfgcheck.yaml" in str(exc.value)
    assert str(exc.value).startswith(f"{repo / 'pyproject.toml'}:1:1:")


@pytest.mark.parametrize("config,line,column,words", [
    ("gate: eror\n", 1, 7, "'eror' is not one of"),
    ("profiles:\n  - paths: runs/**\n    gpus: 0\n", 3, 11, "minimum of 1"),
    ("profiles:\n  - paths: runs/**\n    gpu: a100-8gb\n", 3, 10, "a100-80gb"),
    ("severty:\n  duplicate-key: error\n", 1, 1, "did you mean severity"),
    ("severity:\n  lora-scale-below-on: error\n", 2, 3, "did you mean lora-scale-below-one"),
    ("thresholds:\n  lora-scale-below-one:\n    min_scal: 2\n", 3, 5, "its thresholds: min_effective_step, min_scale, target_scale"),
    ("thresholds:\n  lora-scale-below-one:\n    min_scale: high\n", 3, 16, "is not of type 'number'"),
    ("waive:\n  - rule: duplicate-key\n    files: a.json\n", 2, 5, "'reason' is a required property"),
    ("rules:\n  only: [Duplicate_Key]\n", 2, 10, "does not match"),
    ("gate: [warning\n", 2, 1, "invalid YAML"),
])
def test_errors_carry_file_line_column(tmp_path, config, line, column, words):
    repo = make_repo(tmp_path, config)
    with pytest.raises(ProjectError) as exc:
        projectmod.discover([repo])
    text = str(exc.value)
    assert text.startswith(f"{repo / 'cfgcheck.yaml'}:{line}:{column}: project config: "), text
    assert words in text


def test_toml_errors_carry_positions(tmp_path):
    pytest.importorskip("tomllib", reason="tomllib is Python 3.11+")
    repo = make_repo(tmp_path, """\
        [tool.cfgcheck]
        gate = "error"

        [[tool.cfgcheck.profiles]]
        paths = "a/**"

        [[tool.cfgcheck.profiles]]
        paths = "b/**"
        gpus = 0
        """, name="pyproject.toml")
    with pytest.raises(ProjectError) as exc:
        projectmod.discover([repo])
    assert str(exc.value).startswith(f"{repo / 'pyproject.toml'}:9:1: project config: profiles.1.gpus")


def test_cli_reports_a_bad_project_file_without_traceback(tmp_path):
    repo = make_repo(tmp_path, "gate: sometimes\n")
    (repo / "a.yaml").write_text(BF16_RUN)
    r = runner.invoke(app, ["lint", str(repo / "a.yaml")])
    assert r.exit_code == 2 and "cfgcheck.yaml:1:7: project config:" in r.output
    assert r.exception is None or isinstance(r.exception, SystemExit)


def test_gate_and_show_from_the_project_and_flags_override(tmp_path):
    repo = make_repo(tmp_path, "gate: error\n")
    cfg = repo / "lora.yaml"
    cfg.write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")  # a warning only
    assert runner.invoke(app, ["lint", str(cfg)]).exit_code == 0
    assert runner.invoke(app, ["lint", str(cfg), "--gate", "warning"]).exit_code == 1
    assert runner.invoke(app, ["lint", str(cfg), "--no-project"]).exit_code == 1


def test_lint_without_a_project_file_does_not_import_jsonschema(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "a.yaml").write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    code = ("import sys; from cfgcheck import api; r = api.lint([sys.argv[1]]); "
            "assert r.findings; print('jsonschema' in sys.modules)")
    p = subprocess.run([sys.executable, "-c", code, str(tmp_path / "a.yaml")], capture_output=True,
                       text=True, cwd=ROOT)
    assert p.returncode == 0, p.stderr
    assert p.stdout.strip() == "False"
    (tmp_path / "cfgcheck.yaml").write_text("gate: error\n")
    p = subprocess.run([sys.executable, "-c", code, str(tmp_path / "a.yaml")], capture_output=True,
                       text=True, cwd=ROOT)
    assert p.stdout.strip() == "True"  # validated with jsonschema once a project file exists


def test_no_paths_lints_the_project_configs_from_the_working_folder(tmp_path, monkeypatch):
    repo = make_repo(tmp_path, "configs: ['train/*.yaml']\n")
    (repo / "train").mkdir()
    (repo / "train" / "a.yaml").write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    (repo / "notes.yaml").write_text("use_peft: true\nlora_r: 16\nlora_alpha: 8\n")
    monkeypatch.chdir(repo / "train")
    r = runner.invoke(app, ["lint"])
    assert r.exit_code == 1, r.output
    assert "a.yaml" in r.output and "notes.yaml" not in r.output and "1 config checked" in r.output
    r = runner.invoke(app, ["lint", "--no-project"])  # no project: the working folder (train/)
    assert r.exit_code == 1 and "a.yaml" in r.output and "notes.yaml" not in r.output


def test_engine_takes_per_file_options(tmp_path):
    from cfgcheck import engine

    for card in ("t4", "a100"):
        (tmp_path / card).mkdir()
        (tmp_path / card / "run.yaml").write_text(BF16_RUN)
    t4 = api.make_options(gpu="t4")
    a100 = api.make_options(gpu="a100-80gb")
    report = engine.lint_paths([tmp_path], options_for=lambda f: t4 if "/t4/" in f else a100)
    hits = {Path(fr.file).parent.name: "precision-unsupported-on-gpu" in {f.rule for f in fr.findings}
            for fr in report.files}
    assert hits == {"a100": False, "t4": True}  # bf16 needs compute capability 8.0; T4 has 7.5


def test_fix_and_plan_follow_the_hardware_profile(tmp_path):
    repo = make_repo(tmp_path, """\
        profiles:
          - paths: runs/t4/**
            gpu: t4
        """)
    (repo / "runs" / "t4").mkdir(parents=True)
    cfg = repo / "runs" / "t4" / "train.yaml"
    cfg.write_text(BF16_RUN)
    # the profile's T4 (compute capability 7.5 < 8.0 for bf16, NVIDIA table) makes the precision
    # fix apply with no --gpu flag
    report = api.fix([cfg], training=True, write=False)
    (ff,) = report.files
    assert [a.rule for a in ff.applied] == ["precision-unsupported-on-gpu"]
    assert "bf16: false" in ff.new_text and "fp16: true" in ff.new_text
    assert api.fix([cfg], training=True, write=False, project=None).files[0].applied == []
    ((_, plan),) = api.derive([cfg]).runs
    assert plan.gpu is not None and plan.gpu.name == "t4"
    r = runner.invoke(app, ["fix", "--diff", "--allow-training-changes", str(cfg)])
    assert r.exit_code == 0 and "+bf16: false" in r.output
