"""The derived run as a readable table (text) — a pure function of a Plan."""

from __future__ import annotations

from ..findings import printable
from ..plan import Plan

GB = 1e9
_BAR = 30


def _n(x: int | None) -> str:
    return "-" if x is None else f"{x:,}"


def _params(n: int | None) -> str:
    if n is None:
        return "-"
    if n >= 1e9:
        return f"{n / 1e9:.2f}B"
    if n >= 1e6:
        return f"{n / 1e6:.1f}M"
    return f"{n:,}"


def render_plan(file: str, plan: Plan, *, color: bool = False) -> str:
    rows: list[tuple[str, str]] = []
    method = plan.method or "unknown"
    rows.append(("method", method + ("" if plan.method_stated or not plan.method else " (inferred)")))
    model = plan.model_ref or "-"
    if plan.arch is not None:
        model += f"  [{plan.arch.family}, {plan.arch.source}]"
    rows.append(("model", model))
    if plan.arch is not None and plan.arch.how:
        rows.append(("model match", plan.arch.how + (" (assumed from the name)" if plan.arch.assumed else "")))
    if plan.total_parameters:
        frac = (f" ({100 * plan.trainable_parameters / plan.total_parameters:.3g}%)"
                if plan.trainable_parameters else "")
        moe = ""
        if plan.arch is not None and plan.arch.is_moe:
            from ..knowledge.models import active_parameters

            moe = (f" ({_params(active_parameters(plan.arch))} active per token; all {plan.arch.num_experts} "
                   f"experts per layer stay in memory)")
        rows.append(("parameters", f"{_params(plan.total_parameters)} total{moe}, "
                                   f"{_params(plan.trainable_parameters)} trainable{frac}"))
    if plan.adapter_scale is not None:
        eff = f", effective adapter LR {plan.effective_lr:.3g}" if plan.effective_lr is not None else ""
        rows.append(("adapter scale", f"{plan.adapter_scale:.3g}{eff}"))
        if plan.rslora_alpha:
            rows.append(("rsLoRA alpha", f"~ sqrt(hidden_size) = {plan.rslora_alpha} (rule of thumb)"))
    if plan.context:
        rows.append(("launch", plan.context))
    if plan.learning_rate is not None:
        rows.append(("learning rate", f"{plan.learning_rate:g}"))
    s = plan.schedule
    if s is not None and s.effective_batch:
        rows.append(("effective batch", f"{s.per_device} per device x {s.accumulation} accumulation x "
                                        f"{s.gpus} GPU{'s' if s.gpus != 1 else ''} = {s.effective_batch}"))
    if plan.tokens_per_step:
        rows.append(("tokens per step", f"{_n(plan.tokens_per_step)} (sequence length {plan.seq_len}"
                                        f"{', assumed' if plan.seq_len_assumed else ''})"))
    if s is not None:
        if s.steps_per_epoch:
            rows.append(("steps per epoch", _n(s.steps_per_epoch) + f" ({s.rows:,} rows"
                         + (f" x {s.generations} generations" if s.generations > 1 else "") + ")"))
        rows.append(("total steps", _n(s.total_steps) + (" (max_steps)" if s.max_steps_override else
                                                          "" if s.total_steps else " (rows unknown: --rows N)")))
    if plan.warmup_steps is not None:
        rows.append(("warm-up steps", _n(plan.warmup_steps)))
    if plan.cadence:
        rows.append(("cadence", ", ".join(f"{k} every {v} steps" for k, v in plan.cadence.items())))
    width = max(len(k) for k, _ in rows)
    # names and values come from the file: printable, so none can start a line of its own
    out = [printable(file)]
    out += [f"  {k:<{width}}  {printable(v)}" for k, v in rows]
    m = plan.memory
    if m is None:
        out.append(f"  {'memory':<{width}}  not estimated: {printable(str(plan.memory_problem))}")
    else:
        cap = plan.capacity_bytes
        head = f"{m.total_bytes / GB:.1f} GB per GPU"
        if cap:
            verdict = "fits" if m.total_bytes <= cap else "DOES NOT FIT"
            head += f" of {cap / GB:.0f} GB ({plan.gpu.label}): {verdict}"
        out.append(f"  {'memory':<{width}}  {head}")
        scale = max(cap or 0, m.total_bytes)
        for name, b in m.components():
            if not b:
                continue
            bar = "#" * max(1, round(_BAR * b / scale))
            out.append(f"    {name:<20} {b / GB:7.1f} GB  {bar}")
        if cap:
            out.append(f"    {'capacity':<20} {cap / GB:7.1f} GB  " + "|" * round(_BAR * cap / scale))
    for origin, note in plan.supplied:
        out.append(f"  {origin}: {note}")
    for d in plan.defaults:
        out.append(f"  default: {d}")
    for a in plan.assumptions:
        out.append(f"  assumed: {printable(a)}")
    return "\n".join(out) + "\n"
