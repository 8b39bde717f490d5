"""The pre-commit hook for real: a temporary git repository uses this checkout as its hook
repository, and a commit with a bad config is blocked while a good one goes through.

pre-commit builds a virtualenv and pip-installs the hook repository, so this needs the package
index (or a local wheel mirror); it is marked slow: skip it with -m "not slow".
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow

# alpha 8 < r 16: adapter scale 0.5 (LoRA paper sec. 4.1, scale alpha/r) -> a warning, exit 1;
# 2e-4 is text to PyYAML (YAML 1.1 resolver: a float needs a dot) -> the fix hook writes 2.0e-4
BAD = "use_peft: true\nlora_r: 16\nlora_alpha: 8\nlearning_rate: 2e-5\n"
GOOD = "use_peft: true\nlora_r: 16\nlora_alpha: 32\nlearning_rate: 2.0e-4\n"


def _git(cwd: Path, *args: str, env: dict, check: bool = True) -> subprocess.CompletedProcess:
    p = subprocess.run(["git", *args], cwd=cwd, env=env, capture_output=True, text=True)
    if check and p.returncode != 0:
        raise AssertionError(f"git {' '.join(args)} failed: {p.stdout}\n{p.stderr}")
    return p


def _working_tree_files() -> list[str]:
    p = subprocess.run(["git", "ls-files", "--cached", "--others", "--exclude-standard"], cwd=ROOT,
                       capture_output=True, text=True)
    if p.returncode != 0:
        pytest.skip("the checkout is not a git working tree")
    return [f for f in p.stdout.splitlines() if (ROOT / f).is_file()]


def test_hook_blocks_a_bad_config_and_passes_a_good_one(tmp_path):
    pytest.importorskip("pre_commit", reason="pre-commit (test extra) runs the hook")
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    empty = tmp_path / "gitconfig"
    empty.write_text("")
    env = dict(os.environ, PRE_COMMIT_HOME=str(tmp_path / "pre-commit-home"),
               GIT_CONFIG_GLOBAL=str(empty), GIT_CONFIG_NOSYSTEM="1", NO_COLOR="1",
               PIP_DISABLE_PIP_VERSION_CHECK="1")
    for var in ("GIT_DIR", "GIT_WORK_TREE", "GIT_INDEX_FILE", "PYTHONPATH"):
        env.pop(var, None)
    ident = ["-c", "user.name=Tidewater CI", "-c", "user.email=ci@tidewater.invalid", "-c", "commit.gpgsign=false"]

    # the hook repository: this checkout's files as they are now, committed in a fresh repo
    hooks = tmp_path / "hook-repo"
    for rel in _working_tree_files():
        dest = hooks / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(ROOT / rel, dest)
    _git(hooks, "init", "-q", env=env)
    _git(hooks, "add", "-A", env=env)
    _git(hooks, *ident, "commit", "-q", "-m", "hook repository snapshot", env=env)
    rev = _git(hooks, "rev-parse", "HEAD", env=env).stdout.strip()

    # the training repository that uses it
    repo = tmp_path / "training"
    repo.mkdir()
    _git(repo, "init", "-q", env=env)
    _git(repo, "config", "user.name", "Tidewater CI", env=env)
    _git(repo, "config", "user.email", "ci@tidewater.invalid", env=env)
    _git(repo, "config", "commit.gpgsign", "false", env=env)
    (repo / ".pre-commit-config.yaml").write_text(
        f"repos:\n  - repo: {hooks.as_posix()}\n    rev: {rev}\n    hooks:\n      - id: cfgcheck-fix\n"
        "      - id: cfgcheck-lint\n")
    inst = subprocess.run([sys.executable, "-m", "pre_commit", "install"], cwd=repo, env=env,
                          capture_output=True, text=True)
    assert inst.returncode == 0, inst.stdout + inst.stderr
    _git(repo, "add", ".pre-commit-config.yaml", env=env)
    _git(repo, "commit", "-q", "--no-verify", "-m", "pre-commit config", env=env)

    (repo / "runs").mkdir()
    cfg = repo / "runs" / "route-planner-lora.yaml"
    cfg.write_text(BAD)
    _git(repo, "add", "runs/route-planner-lora.yaml", env=env)
    blocked = _git(repo, "commit", "-m", "route planner adapter", env=env, check=False)
    out = blocked.stdout + blocked.stderr
    assert blocked.returncode != 0, out
    assert "runs/route-planner-lora.yaml:3:13: warning:" in out and "[lora-scale-below-one]" in out
    assert "files were modified by this hook" in out  # pre-commit's own report of the fix hook
    assert cfg.read_text() == BAD.replace("2e-5", "2.0e-5")  # the fix that keeps the meaning
    assert _git(repo, "rev-list", "--count", "HEAD", env=env).stdout.strip() == "1"  # nothing committed

    cfg.write_text(GOOD)
    _git(repo, "add", "runs/route-planner-lora.yaml", env=env)
    passed = _git(repo, "commit", "-m", "route planner adapter, alpha 2 x r", env=env, check=False)
    assert passed.returncode == 0, passed.stdout + passed.stderr
    assert _git(repo, "rev-list", "--count", "HEAD", env=env).stdout.strip() == "2"
