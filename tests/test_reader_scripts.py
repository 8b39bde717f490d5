"""The script that reads a config, named by the launch script that starts it or by the project
file's ``readers``: the keys it declares (and those of the modules of its own tree it imports)
are accepted, wherever it lives. Scripts and configs are invented (the Fenwick crew's runs)."""

from __future__ import annotations

import textwrap

import pytest

from cfgcheck import api
from cfgcheck import project as projectmod
from cfgcheck.knowledge.repo_keys import reader_keys
from cfgcheck.project import ProjectError

ARGS = ("from dataclasses import dataclass\n\n@dataclass\nclass FenwickArguments:\n"
        "    tide_window: int = 4\n    ballast_ratio: float = 0.5\n")
TRAIN = "from fenwick_args import FenwickArguments\nfrom transformers import HfArgumentParser\n"
CONFIG = ("model_name_or_path: acme/tiny-1b\nlearning_rate: 2.0e-5\ntide_window: 8\n"
          "ballast_ratio: 0.25\n")


def _unknown(report):
    return sorted(f.key for f in report.findings if f.rule == "unknown-key")


def _tree(tmp_path):
    """A tool folder with the reader (no repository marker: the repository scan finds nothing),
    and a config folder elsewhere."""
    tool = tmp_path / "tool"
    tool.mkdir()
    (tool / "fenwick_args.py").write_text(ARGS)
    (tool / "train.py").write_text(TRAIN)
    runs = tmp_path / "runs"
    runs.mkdir()
    (runs / "sea.yaml").write_text(CONFIG)
    return tool, runs


def test_reader_keys_follow_the_scripts_own_imports_not_libraries(tmp_path):
    tool, _ = _tree(tmp_path)
    found = reader_keys(str(tool / "train.py"))
    assert {"tide_window", "ballast_ratio"} <= found.keys
    assert found.sources["tide_window"] == "fenwick_args.py FenwickArguments"
    assert found.files == 2  # train.py and fenwick_args.py; transformers is not followed


def test_without_a_named_reader_the_keys_are_unknown(tmp_path):
    _, runs = _tree(tmp_path)
    assert _unknown(api.lint([str(runs / "sea.yaml")], project=None)) == ["ballast_ratio", "tide_window"]


def test_the_launch_script_names_the_reader(tmp_path):
    tool, runs = _tree(tmp_path)
    (runs / "go.sh").write_text(f"python {tool / 'train.py'} sea.yaml\n")
    assert _unknown(api.lint([str(runs)], project=None)) == []


def test_the_project_file_names_the_reader(tmp_path):
    tool, runs = _tree(tmp_path)
    # no repository marker: only the named reader can declare the keys
    (tmp_path / "cfgcheck.yaml").write_text("readers:\n  - configs: runs/*.yaml\n    script: tool/train.py\n")
    assert _unknown(api.lint([str(runs / "sea.yaml")], project=str(tmp_path / "cfgcheck.yaml"))) == []
    # a config the glob does not match keeps its unknown keys
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "sea.yaml").write_text(CONFIG)
    got = api.lint([str(tmp_path / "other" / "sea.yaml")], project=str(tmp_path / "cfgcheck.yaml"))
    assert _unknown(got) == ["ballast_ratio", "tide_window"]


@pytest.mark.parametrize("config,line,column,words", [
    ("readers:\n  - configs: runs/*.yaml\n    script: tool/missing.py\n", 3, 13, "tool/missing.py' not found"),
    ("readers:\n  - configs: runs/*.yaml\n    script: tool/train.sh\n", 3, 13, "is not a Python file"),
    ("readers:\n  - script: tool/train.py\n", 2, 5, "'configs' is a required property"),
    ("readers:\n  - configs: runs/*.yaml\n    script: tool/train.py\n    scrpt: x\n", 4, 5, "scrpt"),
])
def test_a_bad_readers_entry_is_a_positioned_error(tmp_path, config, line, column, words):
    _tree(tmp_path)
    (tmp_path / ".git").mkdir()
    (tmp_path / "cfgcheck.yaml").write_text(textwrap.dedent(config))
    with pytest.raises(ProjectError) as exc:
        projectmod.discover([tmp_path])
    text = str(exc.value)
    assert text.startswith(f"{tmp_path / 'cfgcheck.yaml'}:{line}:{column}: project config: "), text
    assert words in text
