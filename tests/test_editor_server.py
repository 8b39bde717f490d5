"""The editor server, driven over stdio by pygls' own language client, as an editor would.

One session: open a config, receive its diagnostics, apply the fixer's code action, send the
edited buffer, receive the new diagnostics; hover over settings; complete keys and values.
"""

from __future__ import annotations

import asyncio
import sys
from pathlib import Path

import pytest

pytest.importorskip("pygls")
from lsprotocol import types as T  # noqa: E402
from pygls.lsp.client import LanguageClient  # noqa: E402

from cfgcheck.editor import Lines, Workspace  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]

CONFIG = """\
# Quillmere Labs: LoRA for ticket triage
model_name_or_path: meta-llama/Llama-2-7b-hf
use_peft: true
lora_r: 16
lora_alpha: 8
learning_rate: 2e-4
per_device_train_batch_size: 4
gradient_accumulation_steps: 8
num_train_epochs: 1
bf16: true
"""


def _apply(text: str, edits: list[T.TextEdit]) -> str:
    lines = Lines(text)
    for e in sorted(edits, key=lambda e: (e.range.start.line, e.range.start.character), reverse=True):
        a = lines.offset(e.range.start.line, e.range.start.character)
        b = lines.offset(e.range.end.line, e.range.end.character)
        text = text[:a] + e.new_text + text[b:]
    return text


async def _session(tmp_path: Path) -> dict:
    cfg = tmp_path / "triage.yaml"
    cfg.write_text(CONFIG)
    uri = cfg.as_uri()
    client = LanguageClient("cfgcheck-test", "1")
    got: asyncio.Queue = asyncio.Queue()

    @client.feature(T.TEXT_DOCUMENT_PUBLISH_DIAGNOSTICS)
    def diagnostics(params: T.PublishDiagnosticsParams):
        got.put_nowait(params)

    await client.start_io(sys.executable, "-m", "cfgcheck", "editor-server", cwd=str(tmp_path))
    out: dict = {}
    try:
        await client.initialize_async(T.InitializeParams(
            capabilities=T.ClientCapabilities(), root_uri=tmp_path.as_uri(),
            initialization_options={"gpu": "t4", "debounce_seconds": 0.05}))
        client.initialized(T.InitializedParams())
        client.text_document_did_open(T.DidOpenTextDocumentParams(text_document=T.TextDocumentItem(
            uri=uri, language_id="yaml", version=1, text=CONFIG)))
        first = await asyncio.wait_for(got.get(), 30)
        out["first"] = first
        actions = await client.text_document_code_action_async(T.CodeActionParams(
            text_document=T.TextDocumentIdentifier(uri=uri),
            range=T.Range(start=T.Position(0, 0), end=T.Position(12, 0)),
            context=T.CodeActionContext(diagnostics=first.diagnostics)))
        out["actions"] = actions
        keep = next(a for a in actions if a.is_preferred)
        new_text = _apply(CONFIG, keep.edit.changes[uri])
        out["fixed_text"] = new_text
        client.text_document_did_change(T.DidChangeTextDocumentParams(
            text_document=T.VersionedTextDocumentIdentifier(uri=uri, version=2),
            content_changes=[T.TextDocumentContentChangeWholeDocument(text=new_text)]))
        out["second"] = await asyncio.wait_for(got.get(), 30)
        out["hover_alpha"] = await client.text_document_hover_async(T.HoverParams(
            text_document=T.TextDocumentIdentifier(uri=uri), position=T.Position(4, 13)))
        out["hover_batch"] = await client.text_document_hover_async(T.HoverParams(
            text_document=T.TextDocumentIdentifier(uri=uri), position=T.Position(6, 5)))
        out["complete_key"] = await client.text_document_completion_async(T.CompletionParams(
            text_document=T.TextDocumentIdentifier(uri=uri), position=T.Position(11, 0)))
        await client.shutdown_async(None)
        client.exit(None)
    finally:
        await client.stop()
    return out


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    return asyncio.run(_session(tmp_path_factory.mktemp("editor")))


def test_diagnostics_cover_the_value_and_name_the_rule(session):
    diags = {d.code: d for d in session["first"].diagnostics}
    scale = diags["lora-scale-below-one"]
    assert (scale.range.start.line, scale.range.start.character) == (4, 12)  # the 8 of "lora_alpha: 8"
    assert (scale.range.end.line, scale.range.end.character) == (4, 13)
    # alpha 8, r 16 at 2e-4: lr x scale 1e-4 is within the published recipes, so a note
    assert scale.severity == T.DiagnosticSeverity.Information and scale.source == "cfgcheck"
    version = diags["yaml-version-dependent-value"]
    assert (version.range.start.character, version.range.end.character) == (15, 19)  # "2e-4"
    assert diags["precision-unsupported-on-gpu"].severity == T.DiagnosticSeverity.Error  # bf16 on the T4 of the settings


def test_code_actions_are_the_fixers_and_say_their_tier(session):
    titles = {a.title: a for a in session["actions"]}
    preferred = [a for a in session["actions"] if a.is_preferred]
    assert len(preferred) == 1 and preferred[0].title.startswith("cfgcheck: ")
    assert any(t.startswith("cfgcheck (changes training): ") for t in titles)
    # the applied edit is the fixer's own: 2e-4 -> 2.0e-4, nothing else in the buffer moves
    assert session["fixed_text"] == CONFIG.replace("learning_rate: 2e-4", "learning_rate: 2.0e-4")


def test_the_edited_buffer_is_linted_again(session):
    assert session["second"].version == 2
    codes = {d.code for d in session["second"].diagnostics}
    assert "yaml-version-dependent-value" not in codes and "lora-scale-below-one" in codes


def test_hover_says_what_the_run_derives(session):
    alpha = session["hover_alpha"].contents.value
    assert "adapter scale 0.5 (alpha/r)" in alpha  # 8 / 16 (LoRA scale alpha/r, Hu et al. 2021)
    assert "2e-05" in alpha or "1e-04" in alpha or "0.0001" in alpha  # lr 2e-4 x 0.5 = 1e-4
    assert "lora-scale-below-one" in alpha  # the finding on that key, with the rule's rationale
    batch = session["hover_batch"].contents.value
    assert "effective batch 4 per device x 8 accumulation x 1 GPU(s) = 32" in batch


def test_key_completion_offers_the_layouts_keys(session):
    labels = {i.label for i in session["complete_key"].items}
    assert {"learning_rate", "warmup_steps", "lr_scheduler_type"} <= labels


def test_value_completion_offers_the_accepted_words():
    work = Workspace()
    text = "learning_rate: 2.0e-5\nlr_scheduler_type: \n"
    words = {w for w, _ in work.completions(text, "<buffer>", 1, 19)}
    assert {"cosine", "linear", "constant_with_warmup"} <= words  # transformers SchedulerType


def test_offsets_and_positions_count_utf16_units():
    lines = Lines("a: 1\nb: 'x\U0001F600y'\n")
    off = lines.text.index("y")
    assert lines.position(off) == (1, 7)  # the emoji is two UTF-16 code units (LSP 3.17 positions)
    assert lines.offset(1, 7) == off
