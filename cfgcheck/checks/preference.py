"""Checks on preference and reinforcement-learning runs (TRL): generation batch arithmetic,
length budgets, and keys that belong to another trainer."""

from __future__ import annotations

import math

from . import check


def _int(view, name):
    f = view.get(name)
    if f is not None and isinstance(f.value, int) and not isinstance(f.value, bool) and not f.auto:
        return f
    return None


# top-level keys, in order -> the trainer family they point to (a frozen Guess); a cache: the key
# tables the guess reads are fixed for the process, and the configs of a recipe repeat their keys
_GUESS_CACHE: dict[tuple, object] = {}
_GUESS_ENTRIES = 4096  # emptied when full: a bound on the memory a run of varied files takes


def _guess(ctx):
    """The trainer family the view's top-level keys point to (guessed once per view)."""

    def compute():
        data = ctx.view.doc.data if isinstance(ctx.view.doc.data, dict) else {}
        keys = tuple(data)
        got = _GUESS_CACHE.get(keys)
        if got is None:
            from ..knowledge.trainers import guess

            if len(_GUESS_CACHE) >= _GUESS_ENTRIES:
                _GUESS_CACHE.clear()
            got = _GUESS_CACHE[keys] = guess(list(keys))
        return got

    return ctx.once("trainer-guess", compute)


def _trl_trainer_file(view) -> bool:
    return view.layout is not None and view.layout.trainer_defaults


@check("rl-generation-batch-not-divisible", when=("rl.num_generations",))
def generation_batch(ctx) -> None:
    view = ctx.view
    ng = _int(view, "rl.num_generations")
    if ng is None:
        return
    n = ng.value
    if n < 2:
        ctx.report(ng, "too-few", key=ng.key, value=n)
        return
    per = _int(view, "batch.per_device")
    acc = _int(view, "batch.accumulation")
    gen = _int(view, "rl.generation_batch")
    steps = _int(view, "rl.steps_per_generation")
    if per is None and not _trl_trainer_file(view):
        return
    per_v = per.value if per is not None else 8  # TrainingArguments default
    gpus, _ = ctx.num_gpus
    where = f"{gpus} processes" if gpus else "processes not known"
    if gen is not None:
        if gen.value % n:
            ctx.report(gen, "generation-batch", key=gen.key, value=gen.value, n=n, n_key=ng.key)
        return
    k = steps.value if steps is not None else (acc.value if acc is not None else 1)
    k_name = steps.key if steps is not None else (acc.key if acc is not None else
                                                   "gradient_accumulation_steps (default)")
    per_name = per.key if per is not None else "per_device_train_batch_size (default)"
    local = per_v * k
    if gpus:
        total = local * gpus
        if total % n:
            ctx.report(ng, "global", key=ng.key, n=n, total=total, per=per_v, per_key=per_name,
                       steps=k, steps_key=k_name, gpus=gpus, where=where)
        return
    if local % n:
        need = n // math.gcd(local, n)
        ctx.report(ng, "processes-unknown", key=ng.key, n=n, local=local, per=per_v,
                   per_key=per_name, steps=k, steps_key=k_name, need=need)


@check("rl-generation-batch-not-whole-steps", when=("rl.generation_batch",))
def generation_batch_steps(ctx) -> None:
    view = ctx.view
    gen = _int(view, "rl.generation_batch")
    if gen is None:
        return
    per = _int(view, "batch.per_device")
    if per is None and not _trl_trainer_file(view):
        return  # the per-device batch is not known
    per_v = per.value if per is not None else 8  # TrainingArguments default
    per_key = per.key if per is not None else "per_device_train_batch_size (default)"
    gpus, _ = ctx.num_gpus
    steps = _int(view, "rl.steps_per_generation")
    if steps is not None:
        ctx.report(gen, "both-set", related=[steps], key=gen.key, value=gen.value,
                   steps_key=steps.key, steps=steps.value, per=per_v)
        return
    if gpus:
        whole = per_v * gpus
        if gen.value % whole:
            ctx.report(gen, "global", key=gen.key, value=gen.value, global_batch=whole, per=per_v,
                       per_key=per_key, gpus=gpus, suggest=_multiple_near(gen.value, whole))
        return
    if gen.value % per_v:
        ctx.report(gen, "per-device", key=gen.key, value=gen.value, per=per_v, per_key=per_key,
                   suggest=_multiple_near(gen.value, per_v))


def _multiple_near(value: int, step: int) -> int:
    """The nearest multiple of STEP to VALUE, at least STEP (rounding up on a tie)."""
    low = value - value % step
    high = low + step
    return high if low < step or value - low >= high - value else low


@check("rl-lengths-exceed-generation-engine", when=("data.max_completion", "rl.num_generations"))
def lengths_vs_engine(ctx) -> None:
    view = ctx.view
    prompt, comp = _int(view, "data.max_prompt"), _int(view, "data.max_completion")
    if comp is None or _int(view, "rl.num_generations") is None:
        return  # not a GRPO-style run, or no completion length written
    engine = _int(view, "rl.engine_max_len")
    need = comp.value + (prompt.value if prompt is not None else 0)
    parts = f"{prompt.key} {prompt.value} + {comp.key} {comp.value}" if prompt is not None \
        else f"{comp.key} {comp.value} (prompts not counted: no max_prompt_length)"
    if engine is not None:
        if prompt is not None and prompt.value >= engine.value:
            ctx.report(prompt, "prompt", key=prompt.key, prompt=prompt.value, engine_key=engine.key,
                       engine=engine.value)
        elif need > engine.value:
            ctx.report(comp, "engine", key=comp.key, parts=parts, need=need, engine_key=engine.key,
                       engine=engine.value)
        return
    if not view.is_on("rl.use_vllm"):
        return
    arch = ctx.model()
    if arch is None or not arch.max_position_embeddings:
        ctx.cannot_judge("the base model's context window is not known offline")
        return
    if need > arch.max_position_embeddings:
        ctx.report(comp, "model", key=comp.key, parts=parts, need=need, family=arch.family,
                   window=arch.max_position_embeddings)


# TRL defaults, from the config classes' own field defaults
ONLINE_DPO_MAX_LENGTH = 512  # OnlineDPOConfig.max_length (TRL 0.13 and later, from memory)
DPO_MAX_LENGTH = 1024  # DPOConfig.max_length (TRL 0.12 and later)


@check("online-dpo-new-tokens-fill-max-length", when=("rl.max_new_tokens",))
def online_dpo_lengths(ctx) -> None:
    view = ctx.view
    new = _int(view, "rl.max_new_tokens")
    if new is None:
        return
    g = _guess(ctx)
    if g.family is not None and not g.family.startswith("online"):
        return  # max_new_tokens is declared by the online trainers only; the keys say otherwise
    ml = _int(view, "data.max_length")
    if ml is not None:
        if new.value >= ml.value:
            ctx.report(new, "written", key=new.key, new=new.value, ml_key=ml.key, ml=ml.value)
        return
    limit = ctx.thresholds["default_max_length"]
    if new.value >= limit:
        ctx.report(new, "default", key=new.key, new=new.value, ml=limit)


@check("max-prompt-length-leaves-no-completion", when=("data.max_prompt",))
def prompt_vs_max_length(ctx) -> None:
    view = ctx.view
    prompt = _int(view, "data.max_prompt")
    if prompt is None:
        return
    ml = _int(view, "data.max_length")
    if ml is not None:
        if prompt.value >= ml.value:
            ctx.report(prompt, "written", key=prompt.key, prompt=prompt.value, ml_key=ml.key, ml=ml.value)
        return
    g = _guess(ctx)
    if g.family is None or not g.family.startswith("offline") or not _trl_trainer_file(view):
        return  # only the offline preference trainers cut the pair to max_length by default
    limit = ctx.thresholds["default_max_length"]
    comp = _int(view, "data.max_completion")
    need = prompt.value + (comp.value if comp is not None else 0)
    if prompt.value >= limit or (comp is not None and need > limit):
        ctx.report(prompt, "default", key=prompt.key, prompt=prompt.value, need=need, ml=limit,
                   completion=f" + {comp.key} {comp.value}" if comp is not None else "")


@check("key-of-another-trainer")
def key_of_another_trainer(ctx) -> None:
    view = ctx.view
    if not _trl_trainer_file(view):
        return
    g = _guess(ctx)
    if g.family is None or len(g.evidence) < ctx.thresholds["min_evidence"]:
        return
    if len(g.strangers) > len(g.evidence):
        return  # the keys do not agree on one trainer: a file shared by several scripts
    for key, owners in g.strangers:
        ctx.report((key,), on="key", key=key, owners=", ".join(owners), family=g.family,
                   evidence=", ".join(g.evidence))


def _trl_release(ctx):
    """(version tuple, version text, where) of the TRL release in use, or None."""
    from ..knowledge.pins import version_key
    from .releases import installed

    pinned = installed(ctx).get("trl")
    if pinned is None:
        return None
    return version_key(pinned[0])[:2], pinned[0], pinned[1]


@check("sft-batching-unsupported-by-release", when=(("data.padding_free", "data.packing"),))
def sft_batching(ctx) -> None:
    view = ctx.view
    if not _trl_trainer_file(view):
        return
    g = _guess(ctx)
    if g.family != "SFT":
        return  # the guard and the packing mask belong to the SFT trainer (DPO has its own)
    packing = view.is_on("data.packing")
    release = _trl_release(ctx)
    pf = view.get("data.padding_free")
    if pf is not None and pf.value is True and not packing:
        ml = view.get("data.max_length")
        if ml is None or ml.written is not None:
            limit = ml.value if ml is not None else ctx.thresholds["default_max_length"]
            where = f"{ml.key} {limit}" if ml is not None else f"max_length (default {limit})"
            if release is None:
                ctx.report(pf, "padding-free-unpinned", key=pf.key, length=where)
            elif release[0] >= (1, 0):
                ctx.report(pf, "padding-free", key=pf.key, length=where, version=release[1],
                           where=release[2])
    if packing and release is not None and release[0] == (0, 19):
        for name in ("data.completion_only", "data.assistant_only"):
            f = view.get(name)
            if f is not None and f.value is True:
                ctx.report(f, "masked-packing", key=f.key, packing_key=view.get("data.packing").key,
                           version=release[1], where=release[2])
