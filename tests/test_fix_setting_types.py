"""The setting types the fixer relies on match the reference libraries' own annotations."""

from __future__ import annotations

import importlib.metadata as md
import importlib.util
import json
from pathlib import Path

import pytest

from cfgcheck.knowledge.setting_types import setting_type

ROOT = Path(__file__).resolve().parents[1]
DATA = json.loads((ROOT / "cfgcheck" / "knowledge" / "setting_types.json").read_text())


def _tool():
    spec = importlib.util.spec_from_file_location("gen_types", ROOT / "tools" / "generate_setting_types.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_committed_setting_types_are_what_the_installed_libraries_say():
    pytest.importorskip("transformers")
    pytest.importorskip("peft")
    for name, version in DATA["read_from"].items():
        try:
            if md.version(name) != version:
                pytest.skip(f"{name} {md.version(name)} installed, the file was made from {version}")
        except md.PackageNotFoundError:
            pytest.skip(f"{name} is not installed")
    assert _tool().build() == DATA


@pytest.mark.parametrize("path,kind", [
    # transformers TrainingArguments annotations (5.24): output_dir str | None, learning_rate
    # float, bf16 bool, hub_strategy HubStrategy | str, report_to None | str | list[str]
    (("output_dir",), "text"), (("learning_rate",), "number"), (("bf16",), "bool"),
    (("hub_strategy",), "text"), (("report_to",), "mixed"),
    (("tags", 0), "text"), (("r",), "number"), (("training", "output_dir"), "text"),  # PEFT r: int
])
def test_setting_type_lookup(path, kind):
    assert setting_type("trainer", path) == kind
