"""Checks on evaluation and checkpoint saving."""

from __future__ import annotations

from types import MappingProxyType


from ..findings import Edit, Fix
from . import check

_DEFAULT = MappingProxyType({"cadence.eval_strategy": "no", "cadence.save_strategy": "steps",
            "cadence.save_steps": 500})  # transformers TrainingArguments defaults (4.57 and 5.x)


def _word(view, name, defaults: bool):
    f = view.get(name)
    if f is not None and isinstance(f.value, str):
        return f.value.strip().lower(), f
    if f is None and defaults:
        return _DEFAULT.get(name), None
    return None, f


@check("best-model-needs-matching-cadence", when=("cadence.load_best",))
def best_model_cadence(ctx) -> None:
    view = ctx.view
    best = view.get("cadence.load_best")
    if best is None or best.value is not True:
        return
    defaults = view.layout is not None and view.layout.trainer_defaults
    ev, ev_f = _word(view, "cadence.eval_strategy", defaults)
    sv, sv_f = _word(view, "cadence.save_strategy", defaults)
    if ev is None or sv is None:
        return
    if sv != "best" and ev != sv:
        at = sv_f or ev_f or best
        fix = None
        if sv_f is not None and ev in ("steps", "epoch"):
            fix = Fix(tier="changes-training", summary=f"{sv_f.key}: {sv} -> {ev}",
                      edits=(Edit(path=sv_f.path, old=sv_f.written, new=ev),))
        elif sv_f is None and ev_f is not None and ev in ("steps", "epoch"):
            # the default save strategy differs: write one that matches, beside eval_strategy
            fix = Fix(tier="changes-training", summary=f"save_strategy: added as {ev}",
                      edits=(Edit(path=ev_f.path[:-1] + ("save_strategy",), old=None, new=ev,
                                  insert=True, after=ev_f.path),))
        ctx.report(at, "strategies", fix=fix, key=best.leaf, eval=ev, save=sv,
                   eval_from="written" if ev_f else "the default", save_from="written" if sv_f else "the default")
        return
    if ev == sv == "steps":
        es_f, ss_f = view.get("cadence.eval_steps"), view.get("cadence.save_steps")
        es = es_f.value if es_f is not None else None
        ss = ss_f.value if ss_f is not None else (_DEFAULT["cadence.save_steps"] if defaults else None)
        if es is None:
            es = view.value("cadence.logging_steps")  # eval_steps falls back to logging_steps
        if not all(isinstance(x, (int, float)) and not isinstance(x, bool) and x > 0 for x in (es, ss)):
            return
        if (es >= 1) != (ss >= 1):
            ctx.report(ss_f or es_f or best, "mixed", key=best.leaf, save_steps=ss, eval_steps=es)
        elif round(ss * 1e6) % round(es * 1e6) != 0:
            good = (ss // es + 1) * es if es >= 1 else es
            ctx.report(ss_f or es_f or best, "not-multiple", key=best.leaf, save_steps=ss,
                       eval_steps=es, suggestion=f"{good:g}")


@check("eval-strategy-without-eval-data", when=("cadence.eval_strategy",))
def eval_without_data(ctx) -> None:
    view = ctx.view
    if view.layout is None or not view.layout.eval_data_known:
        return
    ev = view.get("cadence.eval_strategy")
    if ev is None or not isinstance(ev.value, str) or ev.value.strip().lower() in ("no", ""):
        return
    data = view.get("data.eval")
    if data is not None and data.value not in (None, 0, 0.0, "", [], False):
        return
    ctx.report(ev, key=ev.leaf, strategy=ev.value.strip())
