"""A language server for editors: the same findings as ``lint`` while the file is being typed.

Started by ``cfgcheck editor-server`` (stdio, the Language Server Protocol through pygls). For
each open YAML/JSON config it publishes the findings of the unsaved buffer, debounced, with the
same rules, severities, waivers, project file and hardware profiles as ``lint``; the range of a
diagnostic covers the value (or key) the finding is about. Code actions are the fixer's own proven
fixes (``fix.fix_text``), never a second implementation: the meaning-keeping ones are offered as
the preferred quick fix, training-changing ones are labelled as such. Hover says what the run
derives from the setting under the cursor (adapter scale and effective step, effective batch and
steps, the memory share) and a rule's rationale on a finding; completion offers the keys of the
file's layout and the accepted words of closed settings.

Everything that is not protocol lives in plain functions (``Workspace``), so it is tested
without a client too.
"""

from __future__ import annotations

import asyncio
import difflib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from urllib.parse import unquote, urlparse

from . import __version__
from . import api
from .engine import Options
from .findings import FileReport
from .findings import Finding, Severity

DEBOUNCE_SECONDS = 0.2  # after the last change, before linting the buffer again
GB = 1e9


def uri_to_path(uri: str) -> str:
    parsed = urlparse(uri)
    if parsed.scheme == "file":
        return unquote(parsed.path)
    return uri


# --------------------------------------------------------------------------- positions

class Lines:
    """Offsets in a text (characters) <-> LSP positions (0-based line, UTF-16 code units)."""

    def __init__(self, text: str):
        self.text = text
        self.starts = [0]
        for i, ch in enumerate(text):
            if ch == "\n":
                self.starts.append(i + 1)

    def position(self, offset: int) -> tuple[int, int]:
        offset = max(0, min(offset, len(self.text)))
        lo, hi = 0, len(self.starts) - 1
        while lo < hi:  # the last line start at or before offset
            mid = (lo + hi + 1) // 2
            if self.starts[mid] <= offset:
                lo = mid
            else:
                hi = mid - 1
        line_text = self.text[self.starts[lo]:offset]
        return lo, len(line_text.encode("utf-16-le")) // 2

    def offset(self, line: int, character: int) -> int:
        if line >= len(self.starts):
            return len(self.text)
        start = self.starts[line]
        end = self.starts[line + 1] - 1 if line + 1 < len(self.starts) else len(self.text)
        units = 0
        for i in range(start, end):
            if units >= character:
                return i
            units += 2 if ord(self.text[i]) > 0xFFFF else 1
        return end


# --------------------------------------------------------------------------- the work, without protocol

@dataclass
class Diagnostic:
    start: tuple[int, int]
    end: tuple[int, int]
    severity: Severity
    rule: str
    message: str
    finding: Finding


@dataclass
class Workspace:
    """Options for the open files (from the project file and the editor's settings)."""

    root: Path | None = None
    settings: dict[str, Any] = field(default_factory=dict)  # gpu, gpus, rows, training_fixes

    def _given(self) -> dict[str, Any]:
        return {k: self.settings[k] for k in ("gpu", "gpus", "rows") if self.settings.get(k) is not None}

    def lint(self, text: str, path: str) -> FileReport:
        project = "auto" if self.root is not None or not path.startswith("<") else None
        from .project import ProjectError

        try:
            return api.lint_text(text, path, project=project, **self._given())
        except (ProjectError, OSError):  # a broken project file must not stop the editor
            return api.lint_text(text, path, project=None, **self._given())

    def options(self, path: str, **extra: Any) -> Options:
        from .project import ProjectError, discover

        given = api.given_options(**self._given(), **extra)
        try:
            proj = discover([path]) if not path.startswith("<") else None
        except ProjectError:
            proj = None
        if proj is not None:
            return proj.options_for(path, given)
        return Options(**{k: v for k, v in given.items() if v is not None})

    # diagnostics -----------------------------------------------------------
    def diagnostics(self, text: str, path: str) -> tuple[list[Diagnostic], FileReport]:
        report = self.lint(text, path)
        lines = Lines(text)
        out: list[Diagnostic] = []
        if report.problem is not None:
            p = report.problem
            start = (max(0, p.line - 1), max(0, p.column - 1))
            out.append(Diagnostic(start, (start[0], start[1] + 1), Severity.ERROR, "input-error",
                                  f"input error: {p.reason}", None))  # type: ignore[arg-type]
            return out, report
        docs = {v.doc.index: v.doc for v in report.views}
        for f in report.findings:
            start, end = self._range(f, docs.get(f.document), lines)
            msg = f.message + (f"\nhint: {f.hint}" if f.hint else "")
            out.append(Diagnostic(start, end, f.severity, f.rule, msg, f))
        return out, report

    @staticmethod
    def _range(f: Finding, doc, lines: Lines) -> tuple[tuple[int, int], tuple[int, int]]:
        at = (f.line - 1, f.column - 1)
        entry = doc.entries.get(tuple(f.path)) if doc is not None else None
        if entry is not None:
            for span in (entry.key, entry.value):
                if span is not None and (span.line, span.column) == (f.line, f.column):
                    end = span.end if span.end > span.start else span.start + 1
                    return lines.position(span.start), lines.position(end)
        # a comment (waivers) or the top level: to the end of that line
        line_end = lines.starts[at[0] + 1] - 1 if at[0] + 1 < len(lines.starts) else len(lines.text)
        start_off = lines.offset(*at)
        return lines.position(start_off), lines.position(max(line_end, start_off + 1))

    # code actions ----------------------------------------------------------
    def fix_for(self, text: str, path: str, rule: str, tier: str) -> tuple[str, list[str]] | None:
        """The fixer's proven rewrite of ``text`` for one rule's fixes, and what it did."""
        from . import fix as fixmod

        options = self.options(path, only=[rule])
        result = fixmod.fix_text(text, path, options, training=(tier == "changes-training"))
        if not result.changed:
            return None
        return result.new_text, [a.summary for a in result.applied]

    @staticmethod
    def text_edits(old: str, new: str) -> list[tuple[tuple[int, int], tuple[int, int], str]]:
        """Line-level edits that turn ``old`` into ``new`` ((start, end, replacement), LSP positions)."""
        a, b = old.splitlines(keepends=True), new.splitlines(keepends=True)
        lines = Lines(old)
        offsets = [0]
        for line in a:
            offsets.append(offsets[-1] + len(line))
        edits = []
        for op, i1, i2, j1, j2 in difflib.SequenceMatcher(a=a, b=b, autojunk=False).get_opcodes():
            if op == "equal":
                continue
            edits.append((lines.position(offsets[i1]), lines.position(offsets[i2]), "".join(b[j1:j2])))
        return edits

    # hover -----------------------------------------------------------------
    def hover(self, text: str, path: str, line: int, character: int) -> str | None:
        report = self.lint(text, path)
        if report.problem is not None or not report.views:
            return None
        offset = Lines(text).offset(line, character)
        best = None
        for view in report.views:
            for p, entry in view.doc.entries.items():
                for span in (entry.key, entry.value):
                    if span is not None and span.start <= offset <= max(span.end, span.start + 1):
                        if best is None or (span.end - span.start) < best[2]:
                            best = (view, p, span.end - span.start)
        if best is None:
            return None
        view, key_path, _ = best
        parts = []
        for f in report.findings:
            if tuple(f.path) == tuple(key_path):
                from .catalogue import load_catalogue

                rule = load_catalogue().get(f.rule)
                parts.append(f"**{f.severity.word}** `{f.rule}`: {f.message}")
                if rule is not None:
                    parts.append(rule.rationale)
        derived = self._derived(view, key_path, path)
        if derived:
            parts.append(derived)
        return "\n\n".join(parts) or None

    def _derived(self, view, key_path: tuple, path: str) -> str | None:
        from .plan import derive_plan, model_of

        names = [n for n, fld in view.fields.items() if tuple(fld.path) == tuple(key_path)]
        if not names:
            return None
        name = names[0]
        opts = self.options(path)
        gpus = view.run.gpus if view.run is not None else opts.gpus  # as the opened run resolved them
        plan = derive_plan(view, model_of(view, path, opts.cwd, declared=opts.models), gpu=opts.gpu, gpus=gpus, rows=opts.rows)
        s = plan.schedule
        if name in ("adapter.alpha", "adapter.rank", "adapter.rslora", "optim.lr"):
            if plan.adapter_scale is None:
                return f"learning rate {plan.learning_rate:g}" if plan.learning_rate is not None else None
            eff = (f"; effective adapter step: learning rate {plan.learning_rate:g} x scale "
                   f"{plan.adapter_scale:.3g} = {plan.effective_lr:.3g}") if plan.effective_lr is not None else ""
            how = "alpha/sqrt(r)" if view.is_on("adapter.rslora") else "alpha/r"
            return f"adapter scale {plan.adapter_scale:.3g} ({how}){eff}"
        if name.startswith("batch.") or name in ("optim.epochs", "optim.max_steps", "data.rows"):
            if s is None or s.effective_batch is None:
                return None
            text = f"effective batch {s.per_device} per device x {s.accumulation} accumulation x {s.gpus} GPU(s) = {s.effective_batch}"
            if s.steps_per_epoch:
                text += f"; {s.steps_per_epoch:,} steps per epoch"
            if s.total_steps:
                text += f", {s.total_steps:,} optimizer steps in all"
            if plan.cadence.get("eval"):
                text += f"; evaluation every {plan.cadence['eval']:,} steps"
            return text
        if name.startswith(("precision.", "quant.", "runtime.gradient_checkpointing", "model.dtype")):
            m = plan.memory
            if m is None:
                return f"memory not estimated: {plan.memory_problem}" if plan.memory_problem else None
            comps = ", ".join(f"{label} {size / GB:.1f} GB ({100 * size / m.total_bytes:.0f}%)"
                              for label, size in m.components() if size > 0)
            cap = f" of the {plan.gpu.label}'s {plan.capacity_bytes / GB:.0f} GB" if plan.gpu else ""
            return f"memory per GPU {m.total_bytes / GB:.1f} GB{cap}: {comps}"
        return None

    # completion ------------------------------------------------------------
    def completions(self, text: str, path: str, line: int, character: int) -> list[tuple[str, str]]:
        """(label, detail) pairs: keys of the layout at a key position, accepted words at a value."""
        from .knowledge import keys as keysmod
        from .view import detect_layout

        report = self.lint(text, path)
        current = text.splitlines()[line] if line < len(text.splitlines()) else ""
        before = current[:character]
        layout = None
        for v in report.views:
            if v.layout is not None:
                layout = v.layout
        if layout is None:  # the buffer may not parse while typing: guess from what has been typed
            try:
                import yaml

                layout, _ = detect_layout(yaml.safe_load(text.replace(before, "", 1)) or {})
            except Exception:
                layout = None
        if ":" in before:  # a value position: the accepted words of that setting
            key = before.split(":", 1)[0].strip().strip("\"'- ")
            return self._value_words(layout, key, path)
        if layout is None or layout.key_table is None or layout.key_table not in keysmod.layouts():
            return []
        prefix = before.strip().strip("\"'- ")
        groups = keysmod._data()["by_parent"][layout.key_table]
        return [(k, "key of " + layout.title) for k in groups.get("", []) if k.startswith(prefix)]

    @staticmethod
    def _value_words(layout, key: str, path: str) -> list[tuple[str, str]]:
        from . import schema

        if Path(path).name == "cfgcheck.yaml" and key == "gpu":
            from .knowledge.hardware import GPUS

            return [(g.name, g.label) for g in GPUS.values()]
        if layout is None:
            return []
        for name, specs in layout.fields.items():
            if key in specs or f"={key}" in specs:
                found = schema.field_schema(name, layout.name)
                enum = found.get("enum") or next(
                    (alt["enum"] for alt in found.get("anyOf", ()) if isinstance(alt, dict) and "enum" in alt), None)
                if enum:
                    return [(str(w), f"accepted for {key}") for w in enum if w is not None]
        return []


# --------------------------------------------------------------------------- the protocol

def make_server(debounce: float = DEBOUNCE_SECONDS):
    """The pygls server (imported only here: lint never pays for it)."""
    from lsprotocol import types as T
    from pygls.lsp.server import LanguageServer

    server = LanguageServer("cfgcheck", __version__)
    work = Workspace()
    pending: dict[str, asyncio.Task] = {}
    last: dict[str, list[Diagnostic]] = {}
    level = {Severity.ERROR: T.DiagnosticSeverity.Error, Severity.WARNING: T.DiagnosticSeverity.Warning,
             Severity.INFO: T.DiagnosticSeverity.Information}

    def publish(uri: str) -> None:
        doc = server.workspace.get_text_document(uri)
        diags, _report = work.diagnostics(doc.source, uri_to_path(uri))
        last[uri] = diags
        server.text_document_publish_diagnostics(T.PublishDiagnosticsParams(
            uri=uri, version=doc.version,
            diagnostics=[T.Diagnostic(
                range=T.Range(start=T.Position(*d.start), end=T.Position(*d.end)),
                severity=level[d.severity], code=d.rule, source="cfgcheck", message=d.message,
                data={"rule": d.rule, "fix": d.finding.fix.tier if d.finding is not None and d.finding.fix else None})
                for d in diags]))

    def schedule(uri: str) -> None:
        old = pending.pop(uri, None)
        if old is not None:
            old.cancel()

        async def later():
            await asyncio.sleep(work.settings.get("debounce_seconds", debounce))
            pending.pop(uri, None)
            publish(uri)

        pending[uri] = asyncio.ensure_future(later())

    @server.feature(T.INITIALIZE)
    def initialize(params: T.InitializeParams):
        if params.root_uri:
            work.root = Path(uri_to_path(params.root_uri))
        if isinstance(params.initialization_options, dict):
            work.settings.update(params.initialization_options)

    @server.feature(T.TEXT_DOCUMENT_DID_OPEN)
    def did_open(params: T.DidOpenTextDocumentParams):
        publish(params.text_document.uri)

    @server.feature(T.TEXT_DOCUMENT_DID_CHANGE)
    def did_change(params: T.DidChangeTextDocumentParams):
        schedule(params.text_document.uri)

    @server.feature(T.TEXT_DOCUMENT_DID_SAVE)
    def did_save(params: T.DidSaveTextDocumentParams):
        schedule(params.text_document.uri)

    @server.feature(T.TEXT_DOCUMENT_DID_CLOSE)
    def did_close(params: T.DidCloseTextDocumentParams):
        last.pop(params.text_document.uri, None)
        server.text_document_publish_diagnostics(T.PublishDiagnosticsParams(uri=params.text_document.uri, diagnostics=[]))

    @server.feature(T.TEXT_DOCUMENT_CODE_ACTION,
                    T.CodeActionOptions(code_action_kinds=[T.CodeActionKind.QuickFix]))
    def code_action(params: T.CodeActionParams):
        uri = params.text_document.uri
        doc = server.workspace.get_text_document(uri)
        path = uri_to_path(uri)
        actions, seen = [], set()
        for diag in params.context.diagnostics:
            data = diag.data if isinstance(diag.data, dict) else {}
            rule, tier = data.get("rule"), data.get("fix")
            if not rule or not tier or (rule, tier) in seen:
                continue
            seen.add((rule, tier))
            if tier == "changes-training" and work.settings.get("training_fixes") is False:
                continue
            fixed = work.fix_for(doc.source, path, rule, tier)
            if fixed is None:
                continue
            new_text, summaries = fixed
            edits = [T.TextEdit(range=T.Range(start=T.Position(*s), end=T.Position(*e)), new_text=t)
                     for s, e, t in work.text_edits(doc.source, new_text)]
            label = "; ".join(summaries) or rule
            title = (f"cfgcheck: {label}" if tier == "keeps-meaning"
                     else f"cfgcheck (changes training): {label}")
            actions.append(T.CodeAction(
                title=title, kind=T.CodeActionKind.QuickFix, diagnostics=[diag],
                is_preferred=(tier == "keeps-meaning"),
                edit=T.WorkspaceEdit(changes={uri: edits})))
        return actions

    @server.feature(T.TEXT_DOCUMENT_HOVER)
    def hover(params: T.HoverParams):
        doc = server.workspace.get_text_document(params.text_document.uri)
        text = work.hover(doc.source, uri_to_path(params.text_document.uri), params.position.line,
                          params.position.character)
        if not text:
            return None
        return T.Hover(contents=T.MarkupContent(kind=T.MarkupKind.Markdown, value=text))

    @server.feature(T.TEXT_DOCUMENT_COMPLETION, T.CompletionOptions(trigger_characters=[":", " "]))
    def completion(params: T.CompletionParams):
        doc = server.workspace.get_text_document(params.text_document.uri)
        items = work.completions(doc.source, uri_to_path(params.text_document.uri),
                                 params.position.line, params.position.character)
        return T.CompletionList(is_incomplete=False, items=[
            T.CompletionItem(label=label, detail=detail) for label, detail in items])

    return server


def serve() -> None:
    make_server().start_io()
