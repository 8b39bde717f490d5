"""Sweeps: a sweep or grid file expands to many runs; lint the combinations and say which fail.

A sweep file is recognised by a top-level ``parameters:`` mapping whose entries say how a
setting varies (``values: [...]``, ``value: x``, ``min:``/``max:``) beside the sweep's own keys
(``method``, ``program``, ``metric``, ``command``) — the shape of W&B sweep configurations — or
by list-valued overrides (``key=a,b,c``, the multirun syntax of Hydra-style launchers), or by the
grid a config gives Hydra's multirun itself (``hydra.sweeper.params``, ``hydra_grid``).
Each parameter contributes its candidate values (``min``/``max``: both ends); the runs are their
product. All runs are linted when there are at most ``ALL_UP_TO`` of them; otherwise the two
extreme runs (every parameter at its first / its last candidate), each parameter's ends with the
others at their first value, and a fixed-seed sample, up to ``MAX_RUNS`` in all.

The base config of the runs is the config file the sweep's ``command`` names (a .yaml/.yml/.json
argument), composed as ``compose.py`` does; without one the parameters alone are the run, read as
trainer arguments (the sweep passes them as ``--key value``).

A finding that some runs share is reported once, located where the sweep sets the value it rests
on (the line of the candidate in ``values:``), and says in how many runs it appears and which.
"""

from __future__ import annotations

import itertools
from dataclasses import replace
from pathlib import Path
from typing import Any

from . import reads
from .load import Document, Entry

ALL_UP_TO = 16
MAX_RUNS = 24
_SWEEP_KEYS = frozenset({"method", "program", "metric", "command", "early_terminate", "run_cap", "project", "entity"})
_SPEC_KEYS = frozenset({"values", "value", "min", "max", "distribution"})


def _flat(params: dict, prefix: str = "", path: tuple = ("parameters",), depth: int = 0):
    """(dotted name, spec, key path of the spec): a nested ``parameters:`` block (a parameter
    whose spec is itself ``{parameters: {...}}``) names the settings inside it as ``outer.inner``."""
    for key, spec in params.items():
        name, at = f"{prefix}{key}", path + (key,)
        inner = spec.get("parameters") if isinstance(spec, dict) else None
        if isinstance(inner, dict) and inner and not set(spec) & _SPEC_KEYS and depth < 4:
            yield from _flat(inner, name + ".", at + ("parameters",), depth + 1)
        else:
            yield name, spec, at


def is_sweep(data: Any) -> bool:
    if not isinstance(data, dict):
        return False
    params = data.get("parameters")
    if not isinstance(params, dict) or not params:
        return False
    flat = list(_flat(params))
    specs = [v for _n, v, _p in flat if isinstance(v, dict) and set(v) & _SPEC_KEYS]
    return bool(specs) and (bool(set(data) & _SWEEP_KEYS) or len(specs) == len(flat))


def _candidates(spec: Any) -> list[tuple[Any, tuple]]:
    """(value, path inside the parameter's mapping) for each candidate."""
    if not isinstance(spec, dict):
        return [(spec, ())]
    if isinstance(spec.get("values"), list) and spec["values"]:
        return [(v, ("values", i)) for i, v in enumerate(spec["values"])]
    if "value" in spec:
        return [(spec["value"], ("value",))]
    ends = [(spec[k], (k,)) for k in ("min", "max") if k in spec]
    return ends or [(None, ())]


def _sample(sizes: list[int]) -> list[tuple[int, ...]]:
    total = 1
    for s in sizes:
        total *= s
    if total <= ALL_UP_TO:
        return list(itertools.product(*[range(s) for s in sizes]))
    picks: list[tuple[int, ...]] = [tuple(0 for _ in sizes), tuple(s - 1 for s in sizes)]
    for i, s in enumerate(sizes):
        for end in (0, s - 1):
            pick = tuple(end if j == i else 0 for j in range(len(sizes)))
            if pick not in picks:
                picks.append(pick)
    import random  # only a sweep too large to lint whole is sampled

    rng = random.Random(0)  # a fixed seed: the same sample every run
    tries = 0
    while len(picks) < min(MAX_RUNS, total) and tries < 10 * MAX_RUNS:
        tries += 1
        pick = tuple(rng.randrange(s) for s in sizes)
        if pick not in picks:
            picks.append(pick)
    return picks[:MAX_RUNS]


def _nest(data: dict, dotted_key: str, value: Any) -> tuple:
    parts = tuple(dotted_key.split("."))
    cur = data
    for part in parts[:-1]:
        nxt = cur.get(part)
        if not isinstance(nxt, dict):
            nxt = {}
            cur[part] = nxt
        cur = nxt
    cur[parts[-1]] = value
    return parts


def _copy(data: Any) -> Any:
    if isinstance(data, dict):
        return {k: _copy(v) for k, v in data.items()}
    if isinstance(data, list):
        return [_copy(v) for v in data]
    return data


def _config_path(word: Any, file: str) -> str | None:
    """The config file WORD names, beside the sweep file, when it exists."""
    if not isinstance(word, str) or not word.strip().lower().endswith((".yaml", ".yml", ".json")):
        return None
    path = Path(file).parent / word.strip()
    try:
        reads.note_kind(path)  # a base file appearing where none was changes the runs
        return str(path) if path.is_file() else None
    except (OSError, ValueError):
        return None


def _base_config(doc: Document, file: str) -> str | None:
    command = doc.data.get("command")
    items = command if isinstance(command, list) else [command] if isinstance(command, str) else []
    for item in items:
        if isinstance(item, str):
            for word in item.split():
                found = _config_path(word.split("=", 1)[-1], file)
                if found is not None:
                    return found
    return None


def _label(names: list[str], values: list[Any]) -> str:
    return ", ".join(f"{n}={v!r}" if isinstance(v, str) else f"{n}={v}" for n, v in zip(names, values))


def split_overrides(overrides) -> tuple[list[str], list[tuple[str, list]]]:
    """key=value overrides -> (the single ones, the list-valued ones as (key, values))."""
    fixed, varying = [], []
    for item in overrides or ():
        key, eq, raw = item.partition("=")
        if eq and "," in raw and not raw.strip().startswith(("[", "{", "'", '"')):
            from .compose import override_value

            varying.append((key.lstrip("+").strip(), [override_value(p) for p in raw.split(",")]))
        else:
            fixed.append(item)
    return fixed, varying


def hydra_grid(doc: Document) -> tuple[list[str], list[list[tuple[Any, Any]]]]:
    """The grid a config defines for Hydra's multirun (Hydra 1.2+, ``hydra.sweeper.params``:
    ``key: a,b,c`` or ``key: choice(a,b)``): (names, candidates located at the param's line);
    empty when the config defines none."""
    data = doc.data if isinstance(doc.data, dict) else {}
    hydra = data.get("hydra")
    sweeper = hydra.get("sweeper") if isinstance(hydra, dict) else None
    params = sweeper.get("params") if isinstance(sweeper, dict) else None
    names: list[str] = []
    cands: list[list[tuple[Any, Any]]] = []
    for key, raw in (params.items() if isinstance(params, dict) else ()):
        if not isinstance(key, str):
            continue
        text = str(raw).strip() if isinstance(raw, (str, int, float)) and not isinstance(raw, bool) else ""
        if text.startswith("choice(") and text.endswith(")"):
            text = text[len("choice("):-1]
        if not text or "(" in text or "," not in text:
            continue  # one value, or a range()/interval() this reader does not expand
        from .compose import override_value

        entry = doc.entries.get(("hydra", "sweeper", "params", key))
        names.append(key.lstrip("+"))
        cands.append([(override_value(part.strip()), entry) for part in text.split(",")])
    return names, cands


def lint_hydra_grid(base_doc: Document, file: str, names, cands, run, report, layout: str | None = None) -> None:
    """Lint the runs of the config's own multirun grid over the config itself."""
    lint_runs(base_doc, file, names, cands, base_doc, file, run, report, layout)


def lint_sweep(doc: Document, file: str, run, report, layout: str | None = None) -> None:
    """Lint the runs of the sweep file DOC into REPORT (an engine FileReport)."""
    flat = list(_flat(doc.data["parameters"]))
    names = [str(n) for n, _spec, _at in flat]
    cands = []
    for _n, spec, at in flat:
        cands.append([(value, doc.entries.get(at + inner) or doc.entries.get(at))
                      for value, inner in _candidates(spec)])
    base_doc = None
    base_file = _base_config(doc, file)
    if base_file is None:
        # a parameter with one value that names an existing config file (``config: {value:
        # base.yaml}``): the program is given the file, so it is the runs' base, not a setting
        for i, (_n, spec, _at) in enumerate(flat):
            if isinstance(spec, dict) and set(spec) == {"value"}:
                base_file = _config_path(spec["value"], file)
                if base_file is not None:
                    del names[i], cands[i]
                    break
    if base_file is not None:
        from . import compose
        from . import load as loadmod

        try:
            src = loadmod.read_source(base_file)
            base_doc = loadmod.load_text(src.text, base_file)[0]
            base_doc = compose.compose(base_doc, base_file)
        except (loadmod.LoadError, compose.ComposeError, IndexError):
            base_doc = None
    lint_runs(base_doc, base_file, names, cands, doc, file, run, report, layout)


def lint_override_sweep(base_doc: Document, file: str, varying: list[tuple[str, list]], run,
                        report, layout: str | None = None) -> None:
    """Lint the runs of list-valued overrides (``lr=1e-5,1e-4``) over the config BASE_DOC."""
    names = [k for k, _v in varying]
    cands = [[(v, None) for v in values] for _k, values in varying]
    lint_runs(base_doc, file, names, cands, base_doc, file, run, report, layout)


def lint_runs(base_doc, base_file, names, cands, doc, file, run, report, layout) -> None:
    """RUN(view) -> (findings, internal errors): the engine's rules over one run's view (the
    engine hands it over, so this module needs nothing above it)."""
    from .view import build_view, detect_layout

    picks = _sample([len(c) for c in cands])
    total = 1
    for c in cands:
        total *= len(c)
    runs: list[tuple[str, list]] = []
    for pick in picks:
        data = _copy(base_doc.data) if base_doc is not None and isinstance(base_doc.data, dict) else {}
        entries: dict[tuple, Entry] = {}
        origins: dict[tuple, str] = {}
        if base_doc is not None:
            entries.update(base_doc.entries)
            origins.update(base_doc.origins or {p: base_file for p in base_doc.entries})
        values = []
        for name, options_of, i in zip(names, cands, pick):
            value, entry = options_of[i]
            values.append(value)
            path = _nest(data, name, value)
            for p in [p for p in entries if p[:len(path)] == path]:
                del entries[p]
            if entry is not None:
                entries[path] = entry
            origins[path] = file
        run_doc = Document(name=doc.name, format=doc.format, data=data, entries=entries,
                           index=doc.index, origins=origins,
                           number_reader=base_doc.number_reader if base_doc is not None else "")
        chosen = layout
        if chosen is None:
            found, _why = detect_layout(data)
            chosen = found.name if found is not None else "trainer"
        view = build_view(run_doc, chosen)
        findings, internal = run(view)
        runs.append((_label(names, values), findings))
        report.views.append(view)
        report.layout = report.layout or chosen
        report.internal.extend(internal)
    merge_runs(runs, total, report)


def merge_runs(runs: list[tuple[str, list]], total: int, report, whole: str = "the sweep") -> None:
    """Each finding of the runs (label, findings) once into REPORT, saying in which runs."""
    seen: dict[tuple, list] = {}
    for label, findings in runs:
        for f in findings:
            key = (f.rule, f.file, f.key, f.line, f.column, f.data.get("variant"))
            seen.setdefault(key, [f, []])[1].append(label)
    linted = len(runs)
    for f, labels in seen.values():
        shown = "; ".join(labels[:3]) + (f"; ... ({len(labels) - 3} more)" if len(labels) > 3 else "")
        if len(labels) == linted:
            note = f"in every run linted ({linted} of {total})"
        else:
            note = f"in {len(labels)} of {linted} runs linted ({total} in {whole}): {shown}"
        report.findings.append(replace(f, data={**f.data, "sweep": note}, fix=None))
