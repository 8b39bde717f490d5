"""Keys the detected layout's libraries do not accept: typos, odd spelling, renamed or removed keys.

Only layouts with generated key lists are judged (trainer arguments, PEFT adapter configs,
DeepSpeed and accelerate files); the recipe runners' own key sets are not scanned, so a key
there is never called a typo.
"""

from __future__ import annotations

from ..layouts import keys_read
from . import check


def _keys_module():
    from ..knowledge import keys  # the key tables load on first use only

    return keys


@check("unknown-key")
def unknown_key(ctx) -> None:
    view = ctx.view
    if view.layout is None:
        return
    keys = _keys_module()
    layout = view.layout.name
    if layout not in keys.layouts():
        return
    groups = keys._data()["by_parent"][layout]
    read = keys_read(view.layout)
    sections = view.layout.sections
    for path, entry in ctx.doc.entries.items():
        if not path or entry.key is None or not all(isinstance(p, str) for p in path):
            continue
        if path[0] in sections and isinstance(ctx.doc.get(path[:1]), dict):
            continue  # a section of the trainer layout (lora:, training:): our structure, not a key
        parent = ".".join(path[:-1])
        if parent not in groups:
            continue  # a free-form mapping (optimizer.params, fsdp_config of the trainer, ...)
        name = f"{parent}.{path[-1]}" if parent else path[-1]
        info = keys.lookup(name, layout)
        if info is not None:
            # key-not-in-release judges known keys against the release in use; this note stays
            # for runs that leave that rule out
            if not info.current and "key-not-in-release" not in ctx.active:
                ctx.report(path, "not-current", on="key", key=name, versions=info.versions_text())
            continue
        if name in read:
            continue  # a key cfgcheck reads for this layout (recipe scripts pass it on): not unknown
        near = keys.suggest(name, layout)
        if near is not None and near.lower() == name.strip().lower().replace(" ", "_"):
            ctx.report(path, "spelling", on="key", key=name, shown=repr(path[-1]), suggestion=near)
        elif near is not None:
            ctx.report(path, "typo", on="key", key=name, suggestion=near)
        else:
            ctx.report(path, "unknown", on="key", key=name, layout=view.layout.title)
