"""Checks on the launch context: launch files, launch scripts and flags against the config."""

from __future__ import annotations

from . import check


@check("launch-context-disagrees")
def launch_context_disagrees(ctx) -> None:
    run = ctx.run
    if run is None:
        return
    for file, reason in run.launch.problems:
        ctx.cannot_judge(reason, launch_file=file)
    view = run.view
    for what, ours, theirs, where in run.disagreements:
        if what == "gpus":
            own = view.get("hardware.num_gpus")
            at = own if where == "" and own is not None else (own or view.get("model.ref"))
            ctx.report(at, "gpus", flag=ours, flag_from=run.gpus_from or "--gpus", launch=theirs,
                       where=where or "the config")
        else:
            f = view.get(what)
            ctx.report(f, "precision", key=f.leaf if f is not None else what, value=ours,
                       launch=theirs, where=where)
