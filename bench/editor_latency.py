#!/usr/bin/env python3
"""Latency of the editor server: from a change sent to its diagnostics received, over stdio.

A real client session (pygls' language client, as in tests/test_editor_server.py): the server is
started with ``cfgcheck editor-server``, a typical LoRA config is opened, then changed N times;
for each change the time until its diagnostics arrive is measured, and the configured debounce is
subtracted (the debounce is the editor's wait for typing to pause, not work).

    python bench/editor_latency.py [--changes 41] [--debounce 0.05]
"""

from __future__ import annotations

import argparse
import asyncio
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

from lsprotocol import types as T
from pygls.lsp.client import LanguageClient

ROOT = Path(__file__).resolve().parents[1]
CONFIG = (ROOT / "fixtures" / "demo" / "harborlight-support-lora.yaml").read_text()


async def run(changes: int, debounce: float) -> list[float]:
    folder = Path(tempfile.mkdtemp(prefix="cfgcheck-bench-editor-"))
    cfg = folder / "run.yaml"
    cfg.write_text(CONFIG)
    uri = cfg.as_uri()
    client = LanguageClient("cfgcheck-bench", "1")
    got: asyncio.Queue = asyncio.Queue()

    @client.feature(T.TEXT_DOCUMENT_PUBLISH_DIAGNOSTICS)
    def diagnostics(params):
        got.put_nowait((time.perf_counter(), params))

    env = dict(os.environ, PYTHONPATH=str(ROOT))
    await client.start_io(sys.executable, "-m", "cfgcheck", "editor-server", cwd=str(folder), env=env)
    await client.initialize_async(T.InitializeParams(
        capabilities=T.ClientCapabilities(), root_uri=folder.as_uri(),
        initialization_options={"gpu": "a100-80gb", "debounce_seconds": debounce}))
    client.initialized(T.InitializedParams())
    client.text_document_did_open(T.DidOpenTextDocumentParams(text_document=T.TextDocumentItem(
        uri=uri, language_id="yaml", version=1, text=CONFIG)))
    await asyncio.wait_for(got.get(), 60)  # the first lint pays for imports: not counted
    out = []
    for i in range(changes):
        text = CONFIG.replace("lora_alpha: 8", f"lora_alpha: {8 + i % 5}")
        sent = time.perf_counter()
        client.text_document_did_change(T.DidChangeTextDocumentParams(
            text_document=T.VersionedTextDocumentIdentifier(uri=uri, version=i + 2),
            content_changes=[T.TextDocumentContentChangeWholeDocument(text=text)]))
        while True:
            at, params = await asyncio.wait_for(got.get(), 60)
            if params.version == i + 2:
                break
        out.append(at - sent - debounce)
    await client.shutdown_async(None)
    client.exit(None)
    await client.stop()
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--changes", type=int, default=41)
    ap.add_argument("--debounce", type=float, default=0.05)
    args = ap.parse_args()
    times = asyncio.run(run(args.changes, args.debounce))
    ms = sorted(t * 1000 for t in times)
    load = os.getloadavg()[0]
    print(f"editor server, change -> diagnostics after a {args.debounce * 1000:.0f} ms debounce, "
          f"{len(ms)} changes (load average {load:.1f}):")
    print(f"  median {statistics.median(ms):.1f} ms, p90 {ms[int(0.9 * (len(ms) - 1))]:.1f} ms, "
          f"min {ms[0]:.1f} ms, max {ms[-1]:.1f} ms (target: under 50 ms)")


if __name__ == "__main__":
    main()
