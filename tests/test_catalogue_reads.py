"""Every key a rule reads is one cfgcheck knows: the view fields the checks (and the plan and step
arithmetic they use) ask for are fields of the view that some layout, runner default or the open
path fills, and the file keys a check reads directly are in the key lists."""

from __future__ import annotations

import ast
import re
from pathlib import Path

from cfgcheck.defaults import DEFAULTS
from cfgcheck.knowledge import keys
from cfgcheck.layouts import FIELD_TYPES, LAYOUTS, keys_read

PKG = Path(__file__).resolve().parents[1] / "cfgcheck"
# the modules whose code decides findings: the checks, and the plan and schedule they read
RULE_CODE = sorted(PKG.glob("checks/*.py")) + [PKG / "plan.py", PKG / "schedule.py"]
_FIELD_NAME = re.compile(r"^[a-z_]+\.[a-z_0-9]+$")
_GROUPS = frozenset(n.split(".")[0] for n in FIELD_TYPES if "." in n)


def field_names_read(source: str) -> dict[str, list[int]]:
    """View field names written in code ("optim.lr"): dotted words whose first part is a group of
    the view's fields (adapter, optim, batch...), with the lines they are on."""
    out: dict[str, list[int]] = {}
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and _FIELD_NAME.match(node.value) \
                and node.value.split(".")[0] in _GROUPS:
            out.setdefault(node.value, []).append(node.lineno)
    return out


def file_keys_read(source: str) -> dict[str, list[int]]:
    """Keys read straight from a document's data: ``X.data.get("k")`` and ``"k" in X.data``."""
    out: dict[str, list[int]] = {}
    for node in ast.walk(ast.parse(source)):
        key, owner = None, None
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "get" \
                and node.args and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str):
            key, owner = node.args[0].value, node.func.value
        elif isinstance(node, ast.Compare) and isinstance(node.left, ast.Constant) \
                and isinstance(node.left.value, str) and isinstance(node.ops[0], (ast.In, ast.NotIn)):
            key, owner = node.left.value, node.comparators[0]
        if key is not None and "doc.data" in ast.unparse(owner):
            out.setdefault(key, []).append(node.lineno)
    return out


def _reads(finder) -> dict[str, list[str]]:
    found: dict[str, list[str]] = {}
    for path in RULE_CODE:
        for name, lines in finder(path.read_text(encoding="utf-8")).items():
            found.setdefault(name, []).extend(f"{path.relative_to(PKG)}:{n}" for n in lines)
    return found


def _filled() -> set[str]:
    """View fields something fills: a layout's key specs or defaults, a runner's default table,
    or the open path (``_supply(view, "name", ...)`` in run.py: launch context, linked files)."""
    filled = {name for lay in LAYOUTS for name in lay.fields}
    filled |= {name for lay in LAYOUTS for name, _, _ in lay.defaults}
    filled |= {d.field for table in DEFAULTS.values() for d in table}
    run = (PKG / "run.py").read_text(encoding="utf-8")
    filled |= set(re.findall(r'_supply\(\s*\w+,\s*"([a-z_]+\.[a-z_0-9]+)"', run))
    return filled


def test_every_view_field_a_rule_reads_is_a_field_of_the_view():
    unknown = {name: where for name, where in _reads(field_names_read).items() if name not in FIELD_TYPES}
    assert unknown == {}, "not a field of the view (layouts.FIELD_TYPES): a misspelt name reads nothing"


def test_every_view_field_a_rule_reads_is_filled_by_something():
    filled = _filled()
    never = {name: where for name, where in _reads(field_names_read).items()
             if name in FIELD_TYPES and name not in filled}
    assert never == {}, "no layout, runner default or launch context fills these: the rule never sees them"


def test_every_file_key_a_check_reads_directly_is_in_the_key_lists():
    read = set().union(*(keys_read(lay) for lay in LAYOUTS))
    unknown = {key: where for key, where in _reads(file_keys_read).items()
               if key not in read and not any(keys.lookup(key, table) for table in keys.layouts())}
    assert unknown == {}, "keys no layout reads and no key list has"


def test_the_finders_find_what_a_check_reads():
    src = (
        "def check(ctx):\n"
        "    view = ctx.view\n"
        "    lr = view.get('optim.lr')\n"
        "    gone = view.effective_value('optim.learnin_rate')\n"
        "    note = 'torch.float16'\n"
        "    if 'gradient_clipping' in ds.doc.data:\n"
        "        return view.doc.data.get('deepspeed')\n"
        "    return other.get('not_a_file_key')\n"
    )
    assert field_names_read(src) == {"optim.lr": [3], "optim.learnin_rate": [4]}
    assert file_keys_read(src) == {"gradient_clipping": [6], "deepspeed": [7]}
    # and the checks against the key lists catch a misspelt one
    assert "optim.learnin_rate" not in FIELD_TYPES and "optim.lr" in FIELD_TYPES
    assert not any(keys.lookup("gradient_cliping", t) for t in keys.layouts())
    assert any(keys.lookup("gradient_clipping", t) for t in keys.layouts())


def test_the_scan_sees_the_checks():
    # the scan covers the rule code: most view fields are read by some rule
    assert len(_reads(field_names_read)) >= 50
    assert "batch.per_device" in _reads(field_names_read)
