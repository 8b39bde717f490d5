"""Case files: every fixable rule, YAML and JSON, input -> expected output byte for byte."""

from __future__ import annotations

import os
import shutil
import stat
from pathlib import Path

import pytest
import yaml

from cfgcheck import api, fix
from cfgcheck._records import replaced
from cfgcheck.knowledge import models

CASES_DIR = Path(__file__).resolve().parents[1] / "fixtures" / "fix"
CASES = yaml.safe_load((CASES_DIR / "cases.yaml").read_text(encoding="utf-8"))


def _files(case: dict) -> tuple[Path, Path, str]:
    stem, ext = case["case"].rsplit(".", 1)
    return CASES_DIR / f"{stem}.in.{ext}", CASES_DIR / f"{stem}.out.{ext}", case["case"]


@pytest.fixture
def known_model(monkeypatch):
    """Make the model resolvable offline, with tied or untied embeddings."""

    def use(tied: bool | None):
        if tied is None:
            return
        base = models.resolve_model("Qwen/Qwen2.5-0.5B")  # bundled catalogue: tied embeddings
        arch = replaced(base, tie_word_embeddings=tied, source="test")
        monkeypatch.setattr(models, "resolve_model", lambda *a, **k: arch)

    return use


def _run(case, path, write=True):
    return fix.fix_file(path, api.make_options(**case.get("options", {})),
                        training=case.get("training", False),
                        halve_batch=case.get("halve_batch", False), write=write)


@pytest.mark.parametrize("case", CASES, ids=[c["case"] for c in CASES])
def test_case_is_fixed_byte_for_byte(case, tmp_path, known_model):
    known_model(True if case.get("tied_model") else None)
    src, expected, name = _files(case)
    target = tmp_path / name
    shutil.copyfile(src, target)
    os.chmod(target, 0o640)
    result = _run(case, target)
    assert result.error is None and result.problem is None, (result.error, result.problem)
    assert [a.rule for a in result.applied] == case["fixed"]
    assert result.written
    assert target.read_bytes() == expected.read_bytes()
    assert stat.S_IMODE(target.stat().st_mode) == 0o640  # the original mode is kept
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]  # no temp file left behind
    # a second run finds nothing to do and writes nothing (halving is an explicit request that
    # halves again each time it is given, so the second run is a plain one)
    before = target.stat()
    again = _run(dict(case, halve_batch=False), target)
    assert not again.changed and not again.written and again.error is None
    assert target.stat().st_mtime_ns == before.st_mtime_ns and target.stat().st_ino == before.st_ino


@pytest.mark.parametrize("case", CASES, ids=[c["case"] for c in CASES])
def test_dry_run_writes_nothing_and_shows_the_same_result(case, tmp_path, known_model):
    known_model(True if case.get("tied_model") else None)
    src, expected, name = _files(case)
    target = tmp_path / name
    shutil.copyfile(src, target)
    result = _run(case, target, write=False)
    assert result.changed and not result.written
    assert target.read_bytes() == src.read_bytes()
    assert fix.encode(__import__("cfgcheck.load", fromlist=["decode"]).decode(src.read_bytes(), name),
                      result.new_text) == expected.read_bytes()
    diff = result.diff()
    assert diff.startswith(f"--- {target}\n+++ {target} (fixed)\n")


@pytest.mark.parametrize("case", CASES, ids=[c["case"] for c in CASES])
def test_expected_output_has_none_of_the_fixed_findings(case, known_model):
    known_model(True if case.get("tied_model") else None)
    _, expected, name = _files(case)
    report = api.lint([expected], **case.get("options", {}))
    assert not report.problems
    left = {f.rule for f in report.findings if f.fix is not None}
    assert not left & set(case["fixed"])


def test_every_rule_with_a_fix_has_a_case_in_yaml_and_json():
    """Each rule whose catalogue record declares a fix is covered; JSON too where the rule applies."""
    from cfgcheck.catalogue import load_catalogue

    fixable = {r.id for r in load_catalogue().values() if r.fix} | {"yaml-version-dependent-value"}
    covered: dict[str, set[str]] = {}
    for case in CASES:
        for rule in case["fixed"]:
            covered.setdefault(rule, set()).add(case["case"].rsplit(".", 1)[1])
    assert fixable <= set(covered), fixable - set(covered)
    for rule, exts in covered.items():
        if rule == "yaml-version-dependent-value":
            assert exts == {"yaml"}  # JSON has one reading of every scalar (RFC 8259)
        else:
            assert exts == {"yaml", "json"}, rule


def test_case_inputs_keep_their_byte_features():
    """The inputs really have what they are named for (CRLF, BOM, no final newline, tabs)."""
    crlf = (CASES_DIR / "exponent-crlf.in.yaml").read_bytes()
    assert crlf.count(b"\r\n") == crlf.count(b"\n") > 0
    bom = (CASES_DIR / "words-bom.in.yaml").read_bytes()
    assert bom.startswith(b"\xef\xbb\xbf") and not bom.endswith(b"\n")
    assert (CASES_DIR / "words-bom.out.yaml").read_bytes().startswith(b"\xef\xbb\xbf")
    assert not (CASES_DIR / "words-bom.out.yaml").read_bytes().endswith(b"\n")
    out = (CASES_DIR / "exponent-crlf.out.yaml").read_bytes()
    assert out.count(b"\r\n") == out.count(b"\n")


@pytest.mark.parametrize("model,added", [
    # Qwen2.5-0.5B ties its input embeddings and output head (shared REFERENCES sec. 13, config copy)
    ("Qwen/Qwen2.5-0.5B", ["embed_tokens"]),
    # Llama-2-7b does not tie them (shared REFERENCES sec. 13, config copy)
    ("meta-llama/Llama-2-7b-hf", ["embed_tokens", "lm_head"]),
])
def test_trainable_modules_fix_follows_the_bundled_model_knowledge(model, added):
    text = (f"model_name_or_path: {model}\nuse_peft: true\nlora_r: 8\nlora_alpha: 16\n"
            "lora_target_modules: [q_proj, v_proj]\nchat_template: \"<start_of_turn>\"\n")  # Gemma markers: in neither vocabulary
    result = fix.fix_text(text, "run.yaml", api.make_options(), training=True)
    assert result.error is None and [a.rule for a in result.applied] == ["chat-format-untrained-embeddings"]
    assert yaml.safe_load(result.new_text)["lora_modules_to_save"] == added
