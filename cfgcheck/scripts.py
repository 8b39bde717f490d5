"""Launch scripts: a shell script that starts a training run names its launch context and configs.

``accelerate launch --config_file A.yaml train.py B.yaml``, ``torchrun --nproc_per_node 8 ...``,
``deepspeed --num_gpus 4 ... --deepspeed ds.json``: the script is parsed with bashlex (a real
shell parser: line continuations, quoting, ``&&`` lists), variables set earlier in the script are
substituted (``LR=2e-4`` ... ``--learning_rate $LR``), and each training command gives a
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
from typing import Any, Iterable

from .load import CONFIG_SUFFIXES as _CONFIG_SUFFIXES, Document, Entry, LoadError, Span, walk_paths

SCRIPT_SUFFIXES = (".sh", ".bash")
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
    unresolved: bool = False  # a variable the script does not set


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


# launcher options that take a value (both spellings are accepted: --num_processes, --num-processes)
_ACCELERATE_VALUED = {
    "config_file", "num_processes", "num_machines", "mixed_precision", "deepspeed_config_file",
    "zero_stage", "main_process_port", "main_process_ip", "machine_rank", "gpu_ids",
    "gradient_accumulation_steps", "offload_optimizer_device", "offload_param_device",
    "fsdp_sharding_strategy", "dynamo_backend", "num_cpu_threads_per_process", "rdzv_backend",
    "deepspeed_hostfile", "deepspeed_multinode_launcher", "gradient_clipping", "zero3_init_flag",
    "fsdp_offload_params", "fsdp_auto_wrap_policy", "fsdp_transformer_layer_cls_to_wrap",
    "fsdp_state_dict_type", "fsdp_version", "same_network", "tpu_name", "downcast_bf16",
    "fsdp_activation_checkpointing", "fsdp_backward_prefetch", "fsdp_reshard_after_forward",
}
_TORCHRUN_VALUED = {"nproc_per_node", "nnodes", "node_rank", "master_addr", "master_port",
                    "rdzv_backend", "rdzv_endpoint", "rdzv_id", "rdzv_conf", "max_restarts",
                    "monitor_interval", "log_dir", "redirects", "tee", "local_addr", "role"}
_DEEPSPEED_VALUED = {"num_gpus", "num_nodes", "include", "exclude", "hostfile", "master_port",
                     "master_addr", "launcher", "launcher_args", "node_rank", "ssh_port"}
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


def _commands(node) -> Iterable:
    """Every simple command under a bashlex node, in order."""
    kind = getattr(node, "kind", "")
    if kind == "command":
        yield node
    for attr in ("parts", "list"):
        for child in getattr(node, attr, None) or ():
            if getattr(child, "kind", "") in ("word", "assignment", "redirect", "parameter"):
                continue
            yield from _commands(child)
    inner = getattr(node, "command", None)
    if inner is not None:
        yield from _commands(inner)


class _Words:
    """A command's words after variable substitution, with their offsets."""

    def __init__(self, env: dict[str, str]):
        self.env = env

    def expand(self, word: str) -> tuple[str, bool]:
        unresolved = False

        def sub(m: re.Match) -> str:
            nonlocal unresolved
            name = m.group(1) or m.group(3)
            if name in self.env:
                return self.env[name]
            if m.group(2) is not None:
                return m.group(2)
            unresolved = True
            return m.group(0)

        return _VAR.sub(sub, word), unresolved


def parse_script(text: str, name: str) -> list[ScriptLaunch]:
    """The training launches of a shell script. Raises LoadError when it cannot be parsed."""
    import bashlex

    try:
        nodes = bashlex.parse(text)
    except Exception as exc:  # bashlex raises its own errors (and sometimes others) on bad input
        pos = getattr(exc, "position", None)
        line, col = _line_col(text, pos) if isinstance(pos, int) and 0 <= pos <= len(text) else (1, 1)
        raise LoadError(f"shell script cannot be parsed: {getattr(exc, 'message', None) or exc}", line, col) from None
    env: dict[str, str] = {}
    words = _Words(env)
    folder = Path(name).parent
    out: list[ScriptLaunch] = []
    for top in nodes:
        for cmd in _commands(top):
            parts = [p for p in cmd.parts if getattr(p, "kind", "") in ("word", "assignment")]
            assigns = [p for p in parts if p.kind == "assignment"]
            plain = [p for p in parts if p.kind == "word"]
            if not plain:  # NAME=value on its own line: a shell variable
                for a in assigns:
                    k, _, v = a.word.partition("=")
                    env[k] = words.expand(v)[0]
                continue
            if plain[0].word == "export":
                for p in plain[1:]:
                    if "=" in p.word:
                        k, _, v = p.word.partition("=")
                        env[k] = words.expand(v)[0]
                continue
            launch = _launch_of(text, name, folder, plain, words)
            if launch is not None:
                out.append(launch)
    return out


def _resolve(ref: str, folder: Path) -> str:
    """A path the script names: absolute as written; else the first that exists of the script's
    folder and the folders above it up to the repository root (scripts are often run from the
    root: ``bash scripts/train.sh``), then the working folder; else against the script's folder."""
    p = Path(ref).expanduser()
    if p.is_absolute():
        return os.path.normpath(str(p))
    start = folder.absolute()
    for base in (start, *start.parents):
        if (base / p).exists():
            return os.path.normpath(str(base / p))
        if (base / ".git").exists():
            break
    if p.exists():
        return os.path.normpath(str(p.absolute()))
    return os.path.normpath(str(start / p))


def _launch_of(text: str, name: str, folder: Path, plain: list, words: _Words) -> ScriptLaunch | None:
    w = [words.expand(p.word)[0] for p in plain]
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
                raw_val, unresolved = val, words.expand(plain[i].word.partition("=")[2])[1]
                i += 1
            elif i + 1 < len(w) and not w[i + 1].startswith("--"):
                raw_val, unresolved = w[i + 1], words.expand(plain[i + 1].word)[1]
                vstart, vend = plain[i + 1].pos
                i += 2
            else:  # a switch: --bf16 means true (HfArgumentParser's store-true booleans)
                raw_val, unresolved, (vstart, vend) = "true", False, node.pos
                i += 1
            if key in ("config", "config_file", "config_path", "cfg") and raw_val.lower().endswith(_CONFIG_SUFFIXES):
                configs.append(_resolve(raw_val, folder))
                continue
            if opt in ("--deepspeed",) and raw_val.lower().endswith(".json"):  # the trainer's own
                files.append(_resolve(raw_val, folder))
            sl.args.append(ScriptArg(key=key, value=_typed(raw_val), text=raw_val,
                                     key_span=_span(text, key_start, key_start + len(opt)),
                                     value_span=_span(text, vstart, vend), unresolved=unresolved))
            continue
        if word.lower().endswith(_CONFIG_SUFFIXES):
            configs.append(_resolve(word, folder))
        elif _DOTLIST.match(word):
            key, _, raw_val = word.partition("=")
            key_start = node.pos[0]
            vstart = key_start + len(plain[i].word.partition("=")[0]) + 1
            # the value stays text here: the composer reads it as its loader does (a YAML scalar)
            sl.dotlist.append(ScriptArg(key=key.lstrip("+"), value=raw_val, text=raw_val,
                                        key_span=_span(text, key_start, key_start + len(key)),
                                        value_span=_span(text, vstart, node.pos[1]),
                                        unresolved=words.expand(plain[i].word.partition("=")[2])[1]))
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
_LAUNCHERS = {"accelerate launch": ("accelerate launch", _ACCELERATE_VALUED),
              "torchrun": ("torchrun", _TORCHRUN_VALUED),
              "deepspeed": ("deepspeed launcher", _DEEPSPEED_VALUED)}

_FLAGS = {"multi_gpu", "use_deepspeed", "use_fsdp", "use_megatron_lm", "cpu", "tpu", "no_python",
          "module", "m", "quiet", "q", "standalone", "debug", "no_local_rank", "enable_each_rank_log",
          "bind_cores_to_rank", "force_multi", "autotuning", "elastic_training", "save_pid",
          "no_ssh_check", "no_ssh", "use_cpu"}


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
_READS_DOTLIST = {"llamafactory-cli": True, "tune": True, "axolotl": False, "trl": False}
_READS_FLAGS = {"llamafactory-cli": False, "tune": False, "axolotl": True, "trl": True}
# arguments that name files the launch context reads itself, never settings of the config
_FILE_ARGS = {"deepspeed": "a DeepSpeed JSON (read as a launch file)"}
# how a runner's CLI keywords nest (``--trl.beta`` / ``trl__beta`` set ``trl.beta``)
_NESTING = {"axolotl": ("__", ".")}
# a runner CLI's own options, never settings of the config
_CLI_OPTIONS = {"axolotl": {"launcher", "cloud", "sweep", "debug", "debug_text_only", "debug_num_examples",
                            "prompter", "shard"}}
# ``--no-k`` sets a boolean k to false
_NEGATES = {"axolotl": True}


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
                              value_span=a.value_span)
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
    for path, a, word in pairs:
        cur = data
        for part in path[:-1]:
            nxt = cur.get(part)
            if not isinstance(nxt, dict):
                nxt = cur[part] = {}
            cur = nxt
        cur[path[-1]] = read_word(a.text) if word and read_word else a.value  # a later one wins
        entries[path] = Entry(value=a.value_span, key=a.key_span, raw=a.text)
    entries[()] = Entry(value=Span(line=sl.line, column=1, start=0, end=0), kind="map")
    return Document(name=sl.file, format="shell", data=data, entries=entries)


def script_document(sl: ScriptLaunch, index: int = 0) -> Document | None:
    """A launch's trainer arguments as a flat config document located at the script's lines."""
    if not sl.args:
        return None
    data: dict[str, Any] = {}
    entries: dict[tuple, Entry] = {}
    for a in sl.args:
        if a.key in data:
            continue
        data[a.key] = a.value
        entries[(a.key,)] = Entry(value=a.value_span, key=a.key_span, raw=a.text)
    root = Span(line=sl.line, column=1, start=0, end=0)
    entries[()] = Entry(value=root, kind="map")
    return Document(name=sl.file, format="shell", data=data, entries=entries, index=index)


def find_scripts(paths: Iterable[str | Path]) -> list[str]:
    """Shell scripts named or inside the folders (hidden folders skipped), sorted."""
    return [f for f, named in walk_paths(paths, SCRIPT_SUFFIXES)
            if f.lower().endswith(SCRIPT_SUFFIXES) and (not named or os.path.isfile(f))]


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
