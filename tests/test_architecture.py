"""Imports point one way: lower layers never import higher ones."""

from __future__ import annotations

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "cfgcheck"

# Lower number = lower layer. A module may import only modules of its own layer or below.
LAYERS = {
    "_records": 0, "_patterns": 0, "findings": 0, "load": 0, "knowledge": 0, "memo": 0, "reads": 0, "pipes": 0, "cache": 0,
    "layouts": 1, "schedule": 1, "waivers": 1,
    "view": 2, "catalogue": 2, "defaults": 2, "scripts": 0, "scriptfiles": 0,
    "checks": 3, "plan": 3, "links": 3, "parallel": 3, "compose": 3, "sweep": 3, "run": 3,
    "engine": 4,
    "render": 5, "fix": 5, "project": 5, "projectfile": 5, "baseline": 5, "schema": 3,
    "api": 6, "editor": 6, "lrcurve": 1,
    "cli": 7, "fastcli": 7, "cliparams": 7, "__main__": 8, "__init__": 9,
}


def _layer(module: str) -> int | None:
    top = module.split(".")[0]
    return LAYERS.get(top)


def _imports(path: Path):
    tree = ast.parse(path.read_text())
    rel = path.relative_to(PKG).with_suffix("")
    parts = list(rel.parts)
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = parts[: len(parts) - node.level]
                target = ".".join(base + ([node.module] if node.module else []))
                if not target and node.names:
                    for alias in node.names:
                        yield alias.name
                    continue
                yield target
            elif node.module and node.module.startswith("cfgcheck"):
                yield node.module[len("cfgcheck."):]
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("cfgcheck."):
                    yield alias.name[len("cfgcheck."):]


def test_no_upward_imports():
    upward = []
    for path in PKG.rglob("*.py"):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        my_layer = _layer(me)
        if my_layer is None:
            upward.append(f"{me}: module not assigned to a layer in this test")
            continue
        for target in _imports(path):
            t_layer = _layer(target) if target else None
            if t_layer is not None and t_layer > my_layer:
                upward.append(f"{me} (layer {my_layer}) imports {target} (layer {t_layer})")
    assert upward == []


# Inside the fixer package the stages point down as well: the records every stage shares, then
# value text and file writing, span edits, the proof, the plan (which edits are taken; it asks
# the proof's data comparison), and the package's entry points on top. "fix" alone is the
# package itself (its __init__), as a submodule's "from . import x" names it.
FIX_STAGES = {
    "fix.results": 0,
    "fix.values": 1, "fix.write": 1,
    "fix.edits": 2,
    "fix.proof": 3,
    "fix.plan": 4,
    "fix.__init__": 5, "fix": 5,
}


def test_the_fixer_stages_import_downward_and_formatters_read_only_its_results():
    offenders = []
    for path in sorted((PKG / "fix").glob("*.py")):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        if me not in FIX_STAGES:
            offenders.append(f"{me}: fixer module without a stage in this test")
            continue
        for target in _imports(path):
            if target in FIX_STAGES and FIX_STAGES[target] > FIX_STAGES[me]:
                offenders.append(f"{me} (stage {FIX_STAGES[me]}) imports {target} "
                                 f"(stage {FIX_STAGES[target]})")
    for path in sorted((PKG / "render").glob("*.py")):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        for target in _imports(path):
            if target.split(".")[0] == "fix" and target != "fix.results":
                offenders.append(f"{me} imports {target}: a formatter reads the fixer's result types only")
    assert offenders == []


def test_only_the_cli_exits_or_touches_argv():
    offenders = []
    for path in PKG.rglob("*.py"):
        if path.name in ("cli.py", "__main__.py"):
            continue
        text = path.read_text()
        for word in ("sys.exit(", "sys.argv", "typer.Exit"):
            if word in text:
                offenders.append(f"{path.name}: {word}")
    assert offenders == []


# --------------------------------------------------------------------------- layouts carry their meaning

def _is_layout_name(node: ast.AST, aliases: set[str]) -> bool:
    """``x.layout.name``, ``layout.name``, ``lay.name`` or a variable assigned from one."""
    if isinstance(node, ast.Name):
        return node.id in aliases
    if isinstance(node, ast.Attribute) and node.attr == "name":
        owner = node.value
        if isinstance(owner, ast.Name):
            return owner.id in ("layout", "lay") or owner.id.endswith("_layout")
        if isinstance(owner, ast.Attribute):
            return owner.attr == "layout"
    if isinstance(node, ast.IfExp):
        return _is_layout_name(node.body, aliases) or _is_layout_name(node.orelse, aliases)
    return False


def _names_a_layout(node: ast.AST, names: set[str]) -> bool:
    """A string constant that is some layout's name, or a tuple/list/set of only such names."""
    if isinstance(node, ast.Constant):
        return isinstance(node.value, str) and node.value in names
    if isinstance(node, (ast.Tuple, ast.List, ast.Set)):
        return bool(node.elts) and all(_names_a_layout(e, names) for e in node.elts)
    return False


def _is_layout_object(node: ast.AST, objects: set[str]) -> bool:
    """``TRAINER`` or ``layouts.TRAINER``: a layout compared by identity is a name test too."""
    if isinstance(node, ast.Name):
        return node.id in objects
    return isinstance(node, ast.Attribute) and node.attr in objects


def layout_name_tests(source: str, layout_names: set[str], objects: set[str] = frozenset()) -> list[int]:
    """Lines where code decides something by a layout's name instead of its attributes."""
    tree = ast.parse(source)
    found: list[int] = []
    for fn in [tree] + [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]:
        aliases: set[str] = set()
        for node in ast.walk(fn):
            if isinstance(node, ast.Assign) and _is_layout_name(node.value, set()):
                aliases.update(t.id for t in node.targets if isinstance(t, ast.Name))
        consts: set[str] = set()  # module constants holding layout names: _X = ("trainer", ...)
        for node in ast.walk(fn):
            if isinstance(node, ast.Assign) and _names_a_layout(node.value, layout_names):
                consts.update(t.id for t in node.targets if isinstance(t, ast.Name))
        for node in ast.walk(fn):
            # a table looked up by a layout's name: TABLE[layout.name], TABLE.get(layout.name)
            key = node.slice if isinstance(node, ast.Subscript) else \
                node.args[0] if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) \
                and node.func.attr == "get" and node.args else None
            if key is not None and _is_layout_name(key, aliases):
                found.append(node.lineno)
            if not isinstance(node, ast.Compare):
                continue
            operands = [node.left, *node.comparators]
            if any(_is_layout_name(o, aliases) or _is_layout_object(o, objects) for o in operands) or \
                    any(_names_a_layout(o, layout_names) or
                        (isinstance(o, ast.Name) and o.id in consts) for o in operands):
                found.append(node.lineno)
    return sorted(set(found))


def test_no_rule_or_module_tests_a_layout_by_its_name():
    from cfgcheck import layouts

    names = {lay.name for lay in layouts.LAYOUTS}
    objects = {k for k, v in vars(layouts).items() if isinstance(v, layouts.Layout)}
    offenders = []
    for path in sorted(PKG.rglob("*.py")):
        if path.name == "layouts.py":
            continue  # the layout definitions themselves
        for line in layout_name_tests(path.read_text(), names, objects):
            offenders.append(f"{path.relative_to(PKG)}:{line}")
    assert offenders == [], "decide by a Layout attribute, not its name: " + ", ".join(offenders)


def test_the_layout_name_test_finder_finds_each_spelling():
    names = {"trainer", "axolotl", "llama-factory"}
    src = (
        "_HF = ('trainer', 'llama-factory')\n"
        "def a(view):\n    return view.layout.name == 'axolotl'\n"
        "def b(view):\n    layout = view.layout.name if view.layout else ''\n    return layout in _HF\n"
        "def c(lay):\n    return lay.name != 'trainer'\n"
        "def d(view):\n    return view.layout.trainer_defaults\n"
        "def e(view):\n    return f'{view.layout.name} names'\n"
        "def f(view):\n    return view.layout is TRAINER\n"
        "def g(view):\n    name = view.layout.name if view.layout else None\n    return TABLE.get(name, ())\n"
        "def h(view):\n    return TABLE[view.layout.name]\n"
    )
    assert layout_name_tests(src, names, {"TRAINER"}) == [3, 6, 8, 14, 17, 19]


def _findings_under(layout, text: str, fmt: str = "yaml", **opts):
    from cfgcheck import view as viewmod
    from cfgcheck.engine import Options, lint_view
    from cfgcheck.findings import FileReport
    from cfgcheck.knowledge.hardware import find_gpu
    from cfgcheck.load import load_text

    doc = load_text(text, "case." + fmt, fmt)[0]
    v = viewmod.RunView(doc=doc, layout=layout)
    viewmod.fill(v, layout, doc.data)
    viewmod._infer_method(v)
    options = Options(gpu=find_gpu(opts["gpu"]) if "gpu" in opts else None, rows=opts.get("rows"))
    report = FileReport(file="case." + fmt)
    lint_view(v, options, "case." + fmt, report)
    return sorted((f.rule, f.key, f.data.get("variant")) for f in report.findings)


def test_a_renamed_layout_lints_like_the_original():
    """A layout is its attributes: the same table under another name gives the same findings."""
    from cfgcheck._records import replaced
    from cfgcheck.layouts import AXOLOTL, LLAMA_FACTORY, TORCHTUNE, TRAINER

    cases = [
        (TRAINER, "learning_rate: 2.0e-5\nlr_scheduler_type: constant\nwarmup_ratio: 0.1\n"
                  "load_best_model_at_end: true\neval_strategy: steps\nbf16: true\n"
                  "per_device_train_batch_size: 4\nnum_train_epochs: 1\nmax_steps: 10\n", {"gpu": "t4"}),
        (LLAMA_FACTORY, "finetuning_type: lora\nlora_target: q_proj,v_proj\nlora_rank: 8\n"
                        "lr_scheduler_type: constant\nwarmup_steps: 10\ncutoff_len: 1024\n", {}),
        (AXOLOTL, "adapter: qlora\nlora_r: 8\nlora_alpha: 16\nload_in_4bit: true\n"
                  "peft_init_lora_weights: loftq\nsample_packing: true\nmicro_batch_size: 2\n", {}),
        (TORCHTUNE, "model:\n  _component_: torchtune.models.llama2.lora_llama2_7b\n  lora_rank: 8\n"
                    "  lora_alpha: 16\ndataset:\n  packed: true\ndtype: bf16\nbatch_size: 2\n", {"gpu": "t4"}),
    ]
    for layout, text, opts in cases:
        renamed = replaced(layout, name="acme-runner")
        original = _findings_under(layout, text, **opts)
        assert original, layout.name  # each case says something, so the comparison means something
        assert _findings_under(renamed, text, **opts) == original, layout.name


def test_layout_attributes_hold_known_words():
    from cfgcheck.knowledge import keys
    from cfgcheck.layouts import LAYOUTS
    from cfgcheck.schema import CONSTRAINTS

    lists = {c.word_list for cs in CONSTRAINTS.values() for c in cs if c.word_list}
    for lay in LAYOUTS:
        assert lay.role in ("run", "engine", "launch", "adapter"), lay.name
        assert lay.fp16_mode in ("autocast", "loads-weights", "refused"), lay.name
        assert lay.targets_text in ("regex", "comma-list", "comma-list-or-regex"), lay.name
        assert lay.word_lists <= lists, lay.name
        assert lay.key_table is None or lay.key_table in keys.layouts(), lay.name
        assert set(lay.method_values.values()) <= {"full", "lora", "qlora", "partial"}, lay.name
        assert lay.default_method in (None, "full", "lora", "qlora"), lay.name


def _module_graph() -> dict[str, set[str]]:
    """module -> the cfgcheck modules it imports, at module level or inside functions."""
    graph: dict[str, set[str]] = {}
    for path in PKG.rglob("*.py"):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        graph[me] = {t for t in _imports(path) if t and t != me}
    return graph


def test_no_import_cycle_even_inside_functions():
    graph = _module_graph()
    known = set(graph)

    def resolve(name: str) -> str | None:
        while name and name not in known:
            name = name.rpartition(".")[0]
        return name or None

    edges = {m: {r for t in ts if (r := resolve(t)) and r != m} for m, ts in graph.items()}
    cycles = []
    state: dict[str, int] = {}

    def visit(m: str, stack: list[str]) -> None:
        state[m] = 1
        stack.append(m)
        for t in sorted(edges.get(m, ())):
            if state.get(t) == 1:
                cycles.append(" -> ".join(stack[stack.index(t):] + [t]))
            elif t not in state:
                visit(t, stack)
        stack.pop()
        state[m] = 2

    for m in sorted(edges):
        if m not in state:
            visit(m, [])
    # package __init__ modules re-export lazily from their own submodules; that is not a cycle
    cycles = [c for c in cycles if not c.startswith("__init__")]
    assert cycles == []


# --------------------------------------------------------------------------- no hidden global state

_MUTABLE_CALLS = frozenset({"dict", "list", "set", "defaultdict", "OrderedDict", "Counter", "deque",
                            "bytearray"})


def _is_cache_name(name: str) -> bool:
    """An explicit cache says so in its name: ``_SELECTED_CACHE``, ``_memo_cache``."""
    return name.endswith(("_CACHE", "_cache"))


def _mutable_value(node: ast.AST) -> bool:
    if isinstance(node, (ast.Dict, ast.List, ast.Set, ast.DictComp, ast.ListComp, ast.SetComp)):
        return True
    if isinstance(node, ast.Call):
        f = node.func
        name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else None
        return name in _MUTABLE_CALLS
    return False


def _module_level(body):
    """Statements run at import: the module body and the blocks of its if / try / with."""
    for node in body:
        yield node
        if isinstance(node, (ast.If, ast.Try, ast.With)):
            for part in ("body", "orelse", "finalbody"):
                yield from _module_level(getattr(node, part, []))
            for handler in getattr(node, "handlers", []):
                yield from _module_level(handler.body)


def module_state(source: str) -> list[str]:
    """Module-level names bound to a mutable value, and ``global`` statements, that are not named
    as explicit caches ("line: name")."""
    tree = ast.parse(source)
    found = []
    for node in _module_level(tree.body):
        if isinstance(node, ast.Assign):
            targets, value = node.targets, node.value
        elif isinstance(node, (ast.AnnAssign, ast.AugAssign)) and node.value is not None:
            targets, value = [node.target], node.value
        else:
            continue
        pairs = []
        for t in targets:
            if isinstance(t, (ast.Tuple, ast.List)) and isinstance(value, (ast.Tuple, ast.List)) \
                    and len(t.elts) == len(value.elts):
                pairs += list(zip(t.elts, value.elts))  # A, B = [], {}
            else:
                pairs += [(name, value) for name in (t.elts if isinstance(t, (ast.Tuple, ast.List)) else [t])]
        for name, v in pairs:
            text = ast.unparse(name)
            if _mutable_value(v) and not _is_cache_name(text):
                found.append(f"{node.lineno}: {text}")
    for node in ast.walk(tree):
        if isinstance(node, ast.Global):
            found.extend(f"{node.lineno}: global {n}" for n in node.names if not _is_cache_name(n))
    return found


def test_no_module_global_mutable_state_outside_explicit_caches():
    """Constants are immutable (tuple, frozenset, MappingProxyType); state that changes as the
    program runs lives in a cache that says so in its name, or in a functools cache."""
    offenders = []
    for path in sorted(PKG.rglob("*.py")):
        offenders += [f"{path.relative_to(PKG)}:{hit}" for hit in module_state(path.read_text())]
    assert offenders == [], "make it immutable, or name it an explicit cache: " + ", ".join(offenders)


def test_the_module_state_finder_finds_each_spelling():
    src = (
        "from types import MappingProxyType\n"
        "A = {'x': 1}\n"
        "B: list[int] = []\n"
        "C = frozenset({1, 2})\n"
        "D = MappingProxyType({'x': 1})\n"
        "E = (1, 2)\n"
        "_MEMO_CACHE: dict = {}\n"
        "F, G = [], ()\n"
        "H = defaultdict(list)\n"
        "try:\n    I = set()\nexcept ImportError:\n    pass\n"
        "def f():\n    global _count\n    local = {}\n"
        "class K:\n    table = {}\n"
    )
    assert module_state(src) == ["2: A", "3: B", "8: F", "9: H", "11: I", "15: global _count"]


def test_frozen_tables_refuse_changes():
    from cfgcheck.layouts import FIELD_TYPES, METHOD_WORDS
    from cfgcheck.schema import CONSTRAINTS

    for table in (FIELD_TYPES, METHOD_WORDS, CONSTRAINTS):
        try:
            table["acme.field"] = "str"  # type: ignore[index]
        except TypeError:
            continue
        raise AssertionError("a module table took a new entry")


def test_every_runner_defaults_table_is_named_by_a_layout():
    """A table in defaults.DEFAULTS reaches a run only through ``Layout.defaults_table``."""
    from cfgcheck.defaults import DEFAULTS
    from cfgcheck.layouts import LAYOUTS

    named = {lay.defaults_table for lay in LAYOUTS if lay.defaults_table}
    assert set(DEFAULTS) - named == set(), "name the table in its layout: defaults_table=..."
    assert named - set(DEFAULTS) == set(), "a layout names a defaults table that does not exist"
