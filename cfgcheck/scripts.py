"""Launch scripts: a shell script that starts a training run names its launch context and configs.

``accelerate launch --config_file A.yaml train.py B.yaml``, ``torchrun --nproc_per_node 8 ...``,
``deepspeed --num_gpus 4 ... --deepspeed ds.json``: the script is parsed with bashlex (a real
shell parser: line continuations, quoting, ``&&`` lists), variables set earlier in the script are
substituted (``LR=2e-4`` ... ``--learning_rate $LR``), bash arrays are read (``_prepare`` blanks
what bashlex does not parse to the same length, so every offset stays), a ``for`` loop gives one
launch per round (linted like a sweep's runs), a value only the launch knows (``$1``, ``$(...)``,
a variable from the environment) is unresolved and never linted as text, a default the script
gives (``${LR:-2e-4}``) is kept as an assumption, and each training command gives a
``ScriptLaunch``: processes, machines, mixed precision, the launch files it names, the configs it
passes, and its own ``--key value`` trainer arguments with their positions. The configs it names
are paired with that launch context (``cfgcheck.run``). Arguments given after a config override
that config the way the launch's reader applies them (``overrides_of``): the run of the config is
the config composed with them (``compose.py``), each value located where it was written. A launch
that names no config has its arguments linted like a flat trainer config located at the script's
lines (``script_document``).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Iterable

from . import reads
from .load import CONFIG_SUFFIXES as _CONFIG_SUFFIXES, Document, Entry, LoadError, Span
from .scriptfiles import SCRIPT_SUFFIXES, find_scripts  # noqa: F401 (part of this module's interface)
# the shell parser is pure Python (about 30 ms per KiB): bigger scripts are not launch scripts we read
MAX_SCRIPT_BYTES = 64 * 1024
_VAR = re.compile(r"\$(?:\{([A-Za-z_][A-Za-z0-9_]*)(?::?-([^}]*))?\}|([A-Za-z_][A-Za-z0-9_]*))")


@dataclass
class ScriptArg:
    key: str
    value: Any  # typed: int, float, bool or text
    text: str  # as written after variable substitution
    key_span: Span
    value_span: Span
    unresolved: bool = False  # a variable the script does not set: only the launch knows the value
    assumed: str = ""  # the value is a default the script gives (``${LR:-2e-4}``): in words


@dataclass
class ScriptLaunch:
    file: str
    line: int
    launcher: str  # "accelerate launch" | "torchrun" | "deepspeed launcher" | "python" | a runner CLI
    program: str | None = None
    processes: int | None = None
    processes_option: str = ""
    machines: int | None = None
    mixed_precision: str | None = None
    zero_stage: int | None = None
    launch_files: tuple[str, ...] = ()  # absolute paths of accelerate / DeepSpeed files it names
    configs: tuple[str, ...] = ()  # absolute paths of the configs it passes
    args: list[ScriptArg] = field(default_factory=list)
    # the Python program it runs, as a path, when that file exists (the script reading the configs)
    reader: str | None = None
    # ``key=value`` words after the program (OmegaConf's dotlist: LLaMA-Factory, torchtune)
    dotlist: list[ScriptArg] = field(default_factory=list)
    at: int = 0  # offset of the command in the script: the rounds of a loop share it
    run: str = ""  # the loop values of this round ("LR=5e-4"), when the command is in a loop


_DEFAULT_NOTE = ("{key} {value} is the default the script gives its variable; the environment the "
                 "script is started in may set another value")


# launcher options that take a value (both spellings are accepted: --num_processes, --num-processes)
_ACCELERATE_VALUED = frozenset({
    "config_file", "num_processes", "num_machines", "mixed_precision", "deepspeed_config_file",
    "zero_stage", "main_process_port", "main_process_ip", "machine_rank", "gpu_ids",
    "gradient_accumulation_steps", "offload_optimizer_device", "offload_param_device",
    "fsdp_sharding_strategy", "dynamo_backend", "num_cpu_threads_per_process", "rdzv_backend",
    "deepspeed_hostfile", "deepspeed_multinode_launcher", "gradient_clipping", "zero3_init_flag",
    "fsdp_offload_params", "fsdp_auto_wrap_policy", "fsdp_transformer_layer_cls_to_wrap",
    "fsdp_state_dict_type", "fsdp_version", "same_network", "tpu_name", "downcast_bf16",
    "fsdp_activation_checkpointing", "fsdp_backward_prefetch", "fsdp_reshard_after_forward",
})
_TORCHRUN_VALUED = frozenset({"nproc_per_node", "nnodes", "node_rank", "master_addr", "master_port",
                    "rdzv_backend", "rdzv_endpoint", "rdzv_id", "rdzv_conf", "max_restarts",
                    "monitor_interval", "log_dir", "redirects", "tee", "local_addr", "role"})
_DEEPSPEED_VALUED = frozenset({"num_gpus", "num_nodes", "include", "exclude", "hostfile", "master_port",
                     "master_addr", "launcher", "launcher_args", "node_rank", "ssh_port"})
_PYTHONS = re.compile(r"^(?:.*/)?python(?:[0-9.]*)$")


def _norm(opt: str) -> str:
    return opt.lstrip("-").replace("-", "_")


def _typed(text: str) -> Any:
    low = text.strip().lower()
    if low in ("true", "false"):
        return low == "true"
    try:
        return int(text)
    except ValueError:
        pass
    try:
        v = float(text)
        return v
    except ValueError:
        return text


def _line_col(text: str, offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1
    start = text.rfind("\n", 0, offset) + 1
    return line, offset - start + 1


def _span(text: str, start: int, end: int) -> Span:
    line, col = _line_col(text, start)
    return Span(line=line, column=col, start=start, end=end)


@dataclass
class _Val:
    """A shell variable's value: its text, how it is known ("known", "default": a default the
    script gives in ``${X:-v}`` that the environment may replace, "unknown": set at launch time),
    where a whole value was written (a loop word, an array element), and an array's elements."""

    text: str
    how: str = "known"
    span: tuple[int, int] | None = None
    items: list["_Val"] | None = None


@dataclass
class _Tok:
    word: str
    pos: tuple[int, int]
    how: str = "known"


MAX_ROUNDS = 24  # the most rounds of a script's loops linted: as many runs as a sweep's (sweep.MAX_RUNS)
_WORSE = MappingProxyType({"known": 0, "default": 1, "unknown": 2})
# ${X}, $X, ${X[@]}, ${X[*]}, ${X[3]} as a whole word
_WHOLE = re.compile(r"^\$(?:\{([A-Za-z_][A-Za-z0-9_]*)(?:\[([@*]|[0-9]+)\])?\}|([A-Za-z_][A-Za-z0-9_]*))$")
# what is left after substitution that only the running shell knows: $1, $@, $(...), ${X/a/b}, `...`
_DYNAMIC = re.compile(r"\$[A-Za-z0-9_{(@*#?!$-]|`")
_DECLARES = ("export", "local", "declare", "typeset", "readonly")


def _worst(a: str, b: str) -> str:
    return a if _WORSE[a] >= _WORSE[b] else b


def _expand(word: str, pos: tuple[int, int], env: dict[str, _Val]) -> list[_Tok]:
    """One written word -> the words the shell passes (an array reference gives its elements,
    each located where it was written)."""
    m = _WHOLE.match(word)
    if m:
        name, sub = m.group(1) or m.group(3), m.group(2)
        val = env.get(name)
        if val is None:
            return [_Tok(word, pos, "unknown")]
        if val.items is not None:
            if sub in ("@", "*"):
                items = val.items
            else:
                k = int(sub or 0)
                items = val.items[k:k + 1]
            return [_Tok(v.text, v.span or pos, v.how) for v in items]
        if sub not in (None, "0"):
            return [_Tok(word, pos, "unknown")]
        return [_Tok(val.text, val.span or pos, val.how)]
    how = "known"

    def sub_var(mm: re.Match) -> str:
        nonlocal how
        name = mm.group(1) or mm.group(3)
        if name in env:
            v = env[name]
            how = _worst(how, v.how)
            return " ".join(i.text for i in v.items) if v.items is not None else v.text
        default = mm.group(2)
        if default is not None and not _DYNAMIC.search(default):
            how = _worst(how, "default")
            return default
        how = "unknown"
        return mm.group(0)

    text = _VAR.sub(sub_var, word)
    if _DYNAMIC.search(text):
        how = "unknown"
    return [_Tok(text, pos, how)]


def _value(word: str, pos: tuple[int, int], env: dict[str, _Val], span=None) -> _Val:
    toks = _expand(word, pos, env)
    how = "known"
    for t in toks:
        how = _worst(how, t.how)
    return _Val(" ".join(t.word for t in toks), how, span)


def _prepare(text: str) -> tuple[str, dict[int, tuple[str, bool, list[tuple[str, int, int]]]]]:
    """TEXT with the constructs bashlex does not parse blanked to the same length (every offset,
    line and column stays): array assignments ``NAME=( words )`` / ``NAME+=( ... )`` (returned
    by the name's offset: name, whether it appends, each element's unquoted text and offsets),
    ``$(( ... ))`` (left as an unknown variable) and ``[[ ... ]]`` tests (read as ``true``)."""
    out = list(text)
    arrays: dict[int, tuple[str, bool, list[tuple[str, int, int]]]] = {}
    n, i = len(text), 0
    heredocs: list[tuple[str, bool]] = []

    def blank(a: int, b: int, lead: str, fill: str = " ") -> None:
        """Offsets a..b blanked (newlines kept: every line stays), LEAD written at the start."""
        for k in range(a, b):
            out[k] = "\n" if text[k] == "\n" else (lead[k - a] if k - a < len(lead) else fill)

    def close_paren(j: int) -> int:  # the offset after the ')' that closes the '(' before j
        depth = 1
        while j < n and depth:
            c = text[j]
            if c == "\\":
                j += 2
                continue
            if c in "'\"":
                e = text.find(c, j + 1)
                j = n if e < 0 else e + 1
                continue
            depth += (c == "(") - (c == ")")
            j += 1
        return min(j, n)

    while i < n:
        c = text[i]
        start = i == 0 or text[i - 1] in " \t\n;&|(`"
        if c == "\n" and heredocs:  # the bodies are text the command reads, never commands: blanked
            i += 1
            body = i
            for delim, strip in heredocs:
                while i < n:
                    e = text.find("\n", i)
                    line = text[i:n if e < 0 else e]
                    i = n if e < 0 else e + 1
                    if (line.lstrip("\t") if strip else line) == delim:
                        break
            blank(body, i, "")
            heredocs = []
            continue
        if c == "\\":
            i += 2
            continue
        if c == "#" and start:
            e = text.find("\n", i)
            i = n if e < 0 else e
            continue
        if c == "'":
            e = text.find("'", i + 1)
            i = n if e < 0 else e + 1
            continue
        if text.startswith("$((", i):
            e = close_paren(i + 2)
            blank(i, e, "$", "_")
            i = e
            continue
        if c == '"':
            j = i + 1
            while j < n and text[j] != '"':
                if text[j] == "\\":
                    j += 2
                    continue
                if text.startswith("$((", j):
                    e = close_paren(j + 2)
                    blank(j, e, "$", "_")
                    j = e
                    continue
                j += 1
            i = j + 1
            continue
        if text.startswith("<<", i) and not text.startswith("<<<", i):
            m = re.compile(r"<<(-?)\s*(['\"]?)([A-Za-z0-9_.-]+)\2").match(text, i)
            if m:
                heredocs.append((m.group(3), bool(m.group(1))))
                blank(i, m.end(), "")
                i = m.end()
                continue
        if start and text.startswith("[[", i) and i + 2 < n and text[i + 2] in " \t":
            m = re.compile(r"[ \t]\]\](?=[\s;&|)]|$)").search(text, i + 2)
            if m:
                blank(i, m.end(), "true")
                i = m.end()
                continue
        m = _ARRAY_START.match(text, i) if start else None
        if m:
            items, j = [], m.end()
            while j < n:
                while j < n and text[j] in " \t\n":
                    j += 1
                if j < n and text[j] == "\\" and text[j + 1:j + 2] == "\n":
                    j += 2
                    continue
                if j >= n or text[j] == ")":
                    break
                if text[j] == "#":
                    e = text.find("\n", j)
                    j = n if e < 0 else e
                    continue
                k, word = j, []
                while k < n and text[k] not in " \t\n)":
                    q = text[k]
                    if q == "\\" and k + 1 < n:
                        word.append(text[k + 1])
                        k += 2
                    elif text.startswith("$(", k):  # a substitution inside an element: only the launch knows it
                        e = close_paren(k + 2)
                        word.append(text[k:e])
                        k = e
                    elif q in "'\"":
                        e = text.find(q, k + 1)
                        e = n if e < 0 else e
                        word.append(text[k + 1:e])
                        k = e + 1
                    else:
                        word.append(q)
                        k += 1
                items.append(("".join(word), j, min(k, n)))
                j = k
            if j >= n:
                raise _NotRead("an array assignment that is not closed", text.count("\n", 0, i) + 1)
            name_end = i + len(m.group(1))
            blank(name_end, j + 1, "=%")
            arrays[i] = (m.group(1), bool(m.group(2)), items)
            i = j + 1
            continue
        i += 1
    return "".join(out), arrays


_ARRAY_START = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)(\+?)=\(")


class _NotRead(Exception):
    def __init__(self, reason: str, line: int = 1):
        super().__init__(reason)
        self.reason, self.line = reason, line

_LEAVES = ("word", "assignment", "redirect", "parameter", "reservedword", "operator", "pipe",
           "commandsubstitution", "processsubstitution", "tilde", "heredoc")


class _Walk:
    """Walks the parsed script in order with the variables set so far. A ``for`` loop runs its
    body once per word it iterates over (each a run of its own, like a sweep's), so there are
    several sets of variables at once: ``branches``, each (variables, the loop values chosen)."""

    def __init__(self, text: str, name: str, arrays: dict):
        self.text, self.name, self.arrays = text, name, arrays
        self.folder = Path(name).parent
        self.out: list[ScriptLaunch] = []

    def walk(self, node, branches: list) -> list:
        kind = getattr(node, "kind", "")
        if kind == "command":
            for env, labels in branches:
                self.command(node, env, labels)
            return branches
        if kind == "for":
            return self.loop(node, branches)
        for attr in ("parts", "list"):
            for child in getattr(node, attr, None) or ():
                if getattr(child, "kind", "") in _LEAVES:
                    continue
                branches = self.walk(child, branches)
        inner = getattr(node, "command", None)
        if inner is not None:
            branches = self.walk(inner, branches)
        return branches

    def loop(self, node, branches: list) -> list:
        parts = list(node.parts)
        var = parts[1].word if len(parts) > 1 else ""
        has_in = len(parts) > 2 and getattr(parts[2], "kind", "") == "reservedword" and parts[2].word == "in"
        words, k = [], 3 if has_in else 2
        while has_in and k < len(parts) and getattr(parts[k], "kind", "") == "word":
            words.append(parts[k])
            k += 1
        body = [p for p in parts[k:] if getattr(p, "kind", "") not in _LEAVES]
        new, last_of = [], []
        for env, labels in branches:
            vals = [t for w in words for t in _expand(w.word, w.pos, env)]
            if not has_in or not vals or any(t.how == "unknown" for t in vals):
                vals = [_Tok("$" + var, parts[1].pos, "unknown")]  # iterated at launch time
            room = max(1, MAX_ROUNDS // max(1, len(branches)))
            if len(vals) > room:  # the ends and evenly spaced ones between
                vals = [vals[round(j * (len(vals) - 1) / max(1, room - 1))] for j in range(room)]
            for t in vals:
                e = dict(env)
                e[var] = _Val(t.word, t.how, t.pos)
                new.append((e, labels + ([f"{var}={t.word}"] if len(vals) > 1 else [])))
            last_of.append(len(new) - 1)
        for child in body:
            new = self.walk(child, new)
        # after the loop the variables are those of its last round
        return [(new[j][0], branches[i][1]) for i, j in enumerate(last_of)]

    def command(self, cmd, env: dict, labels: list) -> None:
        parts = [p for p in cmd.parts if getattr(p, "kind", "") in ("word", "assignment")]
        assigns = [p for p in parts if p.kind == "assignment"]
        plain = [p for p in parts if p.kind == "word"]
        if not plain:  # NAME=value on its own line: a shell variable
            for a in assigns:
                self.assign(a, env)
            return
        if plain[0].word in _DECLARES:
            for p in plain[1:]:
                if "=" in p.word and not p.word.startswith("-"):
                    self.assign(p, env)
            return
        if plain[0].word in ("source", ".") or plain[0].word in ("read", "mapfile", "readarray"):
            return  # what a sourced file or input sets is not known here: those variables stay unknown
        toks = [t for p in plain for t in _expand(p.word, p.pos, env)]
        if not toks:
            return
        launch = _launch_of(self.text, self.name, self.folder, toks)
        if launch is not None:
            launch.at = cmd.pos[0]
            launch.run = ", ".join(labels)
            self.out.append(launch)

    def assign(self, node, env: dict) -> None:
        key, plus, value = node.word.partition("=")
        append = key.endswith("+")
        key = key.rstrip("+")
        array = self.arrays.get(node.pos[0])
        if array is not None:
            items = [_value(w, (a, b), env, (a, b)) for w, a, b in array[2]]
            before = env.get(key)
            if array[1] and before is not None:
                items = (before.items if before.items is not None else [before]) + items
            env[key] = _Val(" ".join(v.text for v in items), "known", None, items)
            return
        val = _value(value, node.pos, env)
        if append and key in env:
            old = env[key]
            val = _Val(old.text + val.text, _worst(old.how, val.how))
        env[key] = val


# bash forms bashlex rejects as syntax errors although bash runs them
_UNPARSED = ((re.compile(r"(^|[\s;&|(])for\s*\(\("), "a C-style for loop"),
             (re.compile(r"(^|[\s;&|])\(\("), "an arithmetic command"),
             (re.compile(r"(^|[\s;&|])coproc\s"), "a coproc command"))


def _unparsed_construct(line: str) -> str | None:
    for rx, what in _UNPARSED:
        if rx.search(line):
            return what
    return None


def parse_script(text: str, name: str) -> list[ScriptLaunch]:
    """The training launches of a shell script. Raises LoadError when it cannot be parsed, and
    ScriptNotRead when it uses a shell construct this reader does not follow."""
    import bashlex

    try:
        prepared, arrays = _prepare(text)
    except _NotRead as exc:
        raise ScriptNotRead(exc.reason, exc.line, 1) from None
    try:
        nodes = bashlex.parse(prepared)
    except bashlex.errors.ParsingError as exc:
        pos = getattr(exc, "position", None)
        line, col = _line_col(text, pos) if isinstance(pos, int) and 0 <= pos <= len(text) else (1, 1)
        lines = text.splitlines()
        unread = _unparsed_construct(lines[line - 1] if 0 < line <= len(lines) else "")
        if unread:  # valid bash the parser does not know: named, never an input error
            raise ScriptNotRead(f"a shell construct the shell parser does not implement: {unread}", line, 1) from None
        raise LoadError(f"shell script cannot be parsed: {getattr(exc, 'message', None) or exc}", line, col) from None
    except NotImplementedError as exc:  # valid shell that the parser does not implement
        kind = re.search(r"type = \{([^}]*)\}", str(exc))
        what = "a case statement" if "pattern" in str(exc) else \
            f"a {kind.group(1)}" if kind else f"{exc}"
        raise ScriptNotRead(f"a shell construct the shell parser does not implement: {what}", 0, 1) from None
    except Exception as exc:  # bashlex raises other errors on some inputs
        raise ScriptNotRead(f"the shell parser stopped ({type(exc).__name__})", 0, 1) from None
    w = _Walk(text, name, arrays)
    branches = [({}, [])]
    for top in nodes:
        branches = w.walk(top, branches)
    return w.out


def _resolve(ref: str, folder: Path) -> str:
    """A path the script names: absolute as written; else the first that exists of the script's
    folder and the folders above it up to the repository root (scripts are often run from the
    root: ``bash scripts/train.sh``), then the working folder; else against the script's folder."""
    p = Path(ref).expanduser()
    if p.is_absolute():
        return os.path.normpath(str(p))
    start = folder.absolute()
    for base in (start, *start.parents):
        reads.note_kind(base / p)
        if (base / p).exists():
            return os.path.normpath(str(base / p))
        reads.note_kind(base / ".git")
        if (base / ".git").exists():
            break
    reads.note_kind(p)
    if p.exists():
        return os.path.normpath(str(p.absolute()))
    return os.path.normpath(str(start / p))


def _launch_of(text: str, name: str, folder: Path, plain: list[_Tok]) -> ScriptLaunch | None:
    w = [p.word for p in plain]
    head = os.path.basename(w[0])
    i, launcher, valued = 1, None, set()
    known = _LAUNCHERS.get(" ".join([head] + w[1:2])) or _LAUNCHERS.get(head)
    if known is not None:
        launcher, valued = known
        i = len(launcher.split()) if launcher.startswith("accelerate") else 1
    elif head in _RUNNER_CLIS and len(w) > 1:  # llamafactory-cli train cfg.yaml, axolotl train ...
        launcher, i = head, 2
    elif _PYTHONS.match(head):
        if len(w) > 2 and w[1] == "-m" and w[2] in ("torch.distributed.run", "torch.distributed.launch"):
            launcher, valued, i = "torchrun", _TORCHRUN_VALUED, 3
        else:
            launcher = "python"
    else:
        return None
    line, _col = _line_col(text, plain[0].pos[0])
    sl = ScriptLaunch(file=name, line=line, launcher=launcher)
    if launcher in _RUNNER_CLIS:
        sl.program = w[1]
    files: list[str] = []
    # the launcher's own options, up to the program
    while i < len(w):
        word = w[i]
        if not word.startswith("-"):
            break
        opt, eq, val = word.partition("=")
        key = _norm(opt)
        if launcher in _RUNNER_CLIS:
            break
        if launcher == "python":
            if key == "m" and i + 1 < len(w):
                sl.program, i = w[i + 1], i + 2
                break
            i += 1
            continue
        if not eq and (key in valued or (i + 1 < len(w) and not w[i + 1].startswith("-")
                                          and not w[i + 1].endswith(".py") and key not in _FLAGS)):
            val = w[i + 1] if i + 1 < len(w) else ""
            i += 2
        else:
            i += 1
        _launcher_option(sl, launcher, key, val, folder, files)
    if sl.program is None and i < len(w):
        sl.program = w[i]
        i += 1
    if launcher == "python" and not (sl.program or "").endswith(".py") and sl.program is None:
        return None
    if (sl.program or "").endswith(".py"):
        found = _resolve(sl.program, folder)
        sl.reader = found if os.path.isfile(found) else None
    configs: list[str] = []
    # the program's arguments: configs it is given, and --key value trainer arguments
    while i < len(w):
        word, node = w[i], plain[i]
        if word.startswith("--") and len(word) > 2:
            opt, eq, val = word.partition("=")
            key = _norm(opt)
            key_start = node.pos[0]
            if eq:
                vstart = node.pos[0] + len(opt) + 1
                vend = node.pos[1]
                raw_val, how = val, plain[i].how
                i += 1
            elif i + 1 < len(w) and not w[i + 1].startswith("--"):
                raw_val, how = w[i + 1], plain[i + 1].how
                vstart, vend = plain[i + 1].pos
                i += 2
            else:  # a switch: --bf16 means true (HfArgumentParser's store-true booleans)
                raw_val, how, (vstart, vend) = "true", "known", node.pos
                i += 1
            unresolved = how == "unknown"
            if key in ("config", "config_file", "config_path", "cfg") and raw_val.lower().endswith(_CONFIG_SUFFIXES):
                configs.append(_resolve(raw_val, folder))
                continue
            if opt in ("--deepspeed",) and raw_val.lower().endswith(".json"):  # the trainer's own
                files.append(_resolve(raw_val, folder))
            sl.args.append(ScriptArg(key=key, value=_typed(raw_val), text=raw_val,
                                     key_span=_span(text, key_start, key_start + len(opt)),
                                     value_span=_span(text, vstart, vend), unresolved=unresolved,
                                     assumed=_DEFAULT_NOTE.format(key=opt, value=raw_val) if how == "default" else ""))
            continue
        if word.lower().endswith(_CONFIG_SUFFIXES):
            configs.append(_resolve(word, folder))
        elif _DOTLIST.match(word):
            key, _, raw_val = word.partition("=")
            key_start = node.pos[0]
            vstart = key_start + len(key) + 1
            # the value stays text here: the composer reads it as its loader does (a YAML scalar)
            sl.dotlist.append(ScriptArg(key=key.lstrip("+"), value=raw_val, text=raw_val,
                                        key_span=_span(text, key_start, key_start + len(key)),
                                        value_span=_span(text, vstart, node.pos[1]),
                                        unresolved=plain[i].how == "unknown",
                                        assumed=_DEFAULT_NOTE.format(key=key, value=raw_val)
                                        if plain[i].how == "default" else ""))
        i += 1
    if launcher == "python" and not configs and not sl.args and not sl.dotlist:
        return None
    sl.configs = tuple(configs)
    sl.launch_files = tuple(dict.fromkeys(files))
    return sl


_RUNNER_CLIS = ("llamafactory-cli", "axolotl", "tune", "trl")
# a key=value word: a dotted key (``+`` adds a key in OmegaConf/Hydra overrides), then the value
_DOTLIST = re.compile(r"^\+{0,2}[A-Za-z_][A-Za-z0-9_]*(?:\.[A-Za-z0-9_]+)*=")

# the launchers by their first word(s) -> (our label, the options that take a value)
_LAUNCHERS = MappingProxyType({"accelerate launch": ("accelerate launch", _ACCELERATE_VALUED),
              "torchrun": ("torchrun", _TORCHRUN_VALUED),
              "deepspeed": ("deepspeed launcher", _DEEPSPEED_VALUED)})

_FLAGS = frozenset({"multi_gpu", "use_deepspeed", "use_fsdp", "use_megatron_lm", "cpu", "tpu", "no_python",
          "module", "m", "quiet", "q", "standalone", "debug", "no_local_rank", "enable_each_rank_log",
          "bind_cores_to_rank", "force_multi", "autotuning", "elastic_training", "save_pid",
          "no_ssh_check", "no_ssh", "use_cpu"})


def _int(val: str) -> int | None:
    val = val.strip()
    if ":" in val:  # torchrun --nnodes MIN:MAX: the most it can use
        val = val.rsplit(":", 1)[-1]
    try:
        n = int(val)
    except ValueError:
        return None
    return n if n > 0 else None


def _launcher_option(sl: ScriptLaunch, launcher: str, key: str, val: str, folder: Path,
                     files: list[str]) -> None:
    if launcher == "accelerate launch":
        if key == "config_file" and val:
            files.append(_resolve(val, folder))
        elif key == "deepspeed_config_file" and val:
            files.append(_resolve(val, folder))
        elif key == "num_processes" and _int(val):
            sl.processes, sl.processes_option = _int(val), "--num_processes"
        elif key == "num_machines" and _int(val):
            sl.machines = _int(val)
        elif key == "mixed_precision" and val:
            sl.mixed_precision = val.strip().lower()
        elif key == "zero_stage" and _int(val) is not None:
            sl.zero_stage = _int(val)
    elif launcher == "torchrun":
        if key == "nproc_per_node" and _int(val):
            sl.processes, sl.processes_option = _int(val), "--nproc_per_node"
        elif key == "nnodes" and _int(val):
            sl.machines = _int(val)
    elif launcher == "deepspeed launcher":
        if key == "num_gpus" and _int(val):
            sl.processes, sl.processes_option = _int(val), "--num_gpus"
        elif key == "num_nodes" and _int(val):
            sl.machines = _int(val)


def finish(sl: ScriptLaunch) -> ScriptLaunch:
    """GPUs in the whole job: torchrun and deepspeed count per machine, accelerate over all."""
    if sl.launcher in ("torchrun", "deepspeed launcher") and sl.processes and sl.machines and sl.machines > 1:
        sl.processes *= sl.machines
        sl.processes_option += f" x {sl.machines} machines"
    return sl


def read_script(path: str | Path) -> list[ScriptLaunch]:
    from .load import read_source

    src = read_source(path)
    if len(src.text) > MAX_SCRIPT_BYTES:
        raise ScriptTooLarge(f"a shell script over {MAX_SCRIPT_BYTES // 1024} KiB is not read as a launch script")
    return [finish(s) for s in parse_script(src.text, str(path))]


class ScriptTooLarge(LoadError):
    """Not an input error: the script is left out (skipped), not reported as unreadable."""


class ScriptNotRead(LoadError):
    """Valid shell this reader does not follow: the script is named as not read, with why."""


# How each reader applies the arguments that follow a config on its command line:
# * ``llamafactory-cli train cfg.yaml k=v``: LLaMA-Factory 0.9.5 hparams/parser.py read_args merges
#   ``OmegaConf.from_cli`` of the words after the YAML over it: ``key=value`` words win, ``--key`` words
#   are not read as settings;
# * ``tune run RECIPE --config cfg.yaml k=v``: torchtune 0.6.1 _cli/run.py hands the words to its
#   recipe parser, which merges ``OmegaConf.from_dotlist`` over the file: ``key=value`` wins;
# * ``axolotl train cfg.yml --k v``: axolotl 0.19.0 cli/config.py load_cfg sets each CLI keyword
#   over the file's value; cli/utils/args.py makes one option per config field (``--no-k`` for a
#   boolean's false, ``--trl.beta`` for a nested field, passed on as ``trl__beta``); the train
#   command's own options (cli/main.py, cli/args.py TrainerCliArgs) are not settings;
# * ``trl sft --config cfg.yaml --k v``: TRL's TrlParser.parse_args_and_config reads the file as
#   the defaults, then the command line, so ``--key value`` wins;
# * a Python program given a config (``train.py cfg.yaml --k v``): transformers' HfArgumentParser
#   alone reads a YAML file only through ``parse_yaml_file`` with no other arguments; the
#   training scripts that take a YAML path and more arguments (TrlParser's ``--config``, the
#   argument parsers of training repositories built on it, LLaMA-Factory's read_args) apply the
#   command line over the file, ``--key value`` and ``key=value`` alike. That is what is followed.
_READS_DOTLIST = MappingProxyType({"llamafactory-cli": True, "tune": True, "axolotl": False, "trl": False})
_READS_FLAGS = MappingProxyType({"llamafactory-cli": False, "tune": False, "axolotl": True, "trl": True})
# arguments that name files the launch context reads itself, never settings of the config
_FILE_ARGS = MappingProxyType({"deepspeed": "a DeepSpeed JSON (read as a launch file)"})
# how a runner's CLI keywords nest (``--trl.beta`` / ``trl__beta`` set ``trl.beta``)
_NESTING = MappingProxyType({"axolotl": ("__", ".")})
# a runner CLI's own options, never settings of the config
_CLI_OPTIONS = MappingProxyType({"axolotl": frozenset({"launcher", "cloud", "sweep", "debug", "debug_text_only",
                                                   "debug_num_examples", "prompter", "shard"})})
# ``--no-k`` sets a boolean k to false
_NEGATES = MappingProxyType({"axolotl": True})


def overrides_of(sl: ScriptLaunch) -> list[tuple[tuple, ScriptArg, bool]]:
    """(key path, argument, whether it is a ``key=value`` word) for each argument that overrides
    the configs the launch passes, in the order the reader applies them; empty when the launch
    passes no config."""
    if len(sl.configs) != 1:
        return []  # several configs: which one an argument belongs to is the program's business
    runner = sl.launcher if sl.launcher in _RUNNER_CLIS else None
    out: list[tuple[tuple, ScriptArg, bool]] = []
    if _READS_FLAGS.get(runner, True):
        for a in sl.args:
            if _FILE_ARGS.get(a.key) or a.unresolved or a.key in _CLI_OPTIONS.get(runner, ()):
                continue
            if _NEGATES.get(runner) and a.key.startswith("no_") and a.value is True and a.text == "true":
                a = ScriptArg(key=a.key[3:], value=False, text="false", key_span=a.key_span,
                              value_span=a.value_span, assumed=a.assumed)
            seps = _NESTING.get(runner, ())
            path = tuple(re.split("|".join(map(re.escape, seps)), a.key)) if seps else (a.key,)
            out.append((path, a, False))
    if _READS_DOTLIST.get(runner, True):
        out += [(tuple(a.key.split(".")), a, True) for a in sl.dotlist if not a.unresolved]
    return out


def override_document(sl: ScriptLaunch, read_word=None) -> Document | None:
    """The launch's overriding arguments as a document located at the script's lines (the layer
    composed over the config); ``read_word`` reads a ``key=value`` word's text as its loader does
    (``compose.override_value``)."""
    pairs = overrides_of(sl)
    if not pairs:
        return None
    data: dict[str, Any] = {}
    entries: dict[tuple, Entry] = {}
    assumed: dict[tuple, str] = {}
    for path, a, word in pairs:
        cur = data
        for part in path[:-1]:
            nxt = cur.get(part)
            if not isinstance(nxt, dict):
                nxt = cur[part] = {}
            cur = nxt
        cur[path[-1]] = read_word(a.text) if word and read_word else a.value  # a later one wins
        entries[path] = Entry(value=a.value_span, key=a.key_span, raw=a.text)
        if a.assumed:
            assumed[path] = a.assumed
        else:
            assumed.pop(path, None)
    entries[()] = Entry(value=Span(line=sl.line, column=1, start=0, end=0), kind="map")
    return Document(name=sl.file, format="shell", data=data, entries=entries, assumed=assumed)


def script_document(sl: ScriptLaunch, index: int = 0) -> Document | None:
    """A launch's trainer arguments as a flat config document located at the script's lines. An
    argument whose value only the launch knows (``$1``, ``$(...)``, a variable from outside) is
    not a written value: it is left out."""
    known = [a for a in sl.args if not a.unresolved]
    if not known:
        return None
    data: dict[str, Any] = {}
    entries: dict[tuple, Entry] = {}
    assumed: dict[tuple, str] = {}
    for a in known:
        if a.key in data:
            continue
        data[a.key] = a.value
        entries[(a.key,)] = Entry(value=a.value_span, key=a.key_span, raw=a.text)
        if a.assumed:
            assumed[(a.key,)] = a.assumed
    root = Span(line=sl.line, column=1, start=0, end=0)
    entries[()] = Entry(value=root, kind="map")
    return Document(name=sl.file, format="shell", data=data, entries=entries, index=index,
                    assumed=assumed)


def pairings(scripts: Iterable[str]) -> dict[str, ScriptLaunch]:
    """Config (absolute, normalised path) -> the launch that starts it. Unreadable scripts are
    left out here; linting them reports why."""
    out: dict[str, ScriptLaunch] = {}
    for s in scripts:
        try:
            launches = read_script(s)
        except LoadError:
            continue
        for sl in launches:
            for c in sl.configs:
                out.setdefault(c, sl)
    return out
