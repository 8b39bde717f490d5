"""The peer a user without a dedicated tool would write: validate each config against a JSON Schema.

    python bench/peer_jsonschema.py SCHEMA_DIR FOLDER...

SCHEMA_DIR holds cfgcheck's own schemas (`cfgcheck schema --layout NAME` output) as
trainer.json, deepspeed.json and peft-adapter.json; each validator is built once. Each file is
read with PyYAML's C loader (JSON files with the json module) and validated against the schema
its name points to (deepspeed / adapter in the name, else trainer); the errors are counted.
"""
import json
import sys
from pathlib import Path

import yaml
from jsonschema.validators import validator_for


def main() -> None:
    schemas = Path(sys.argv[1])
    validators = {}
    for name in ("trainer", "deepspeed", "peft-adapter"):
        schema = json.loads((schemas / f"{name}.json").read_text(encoding="utf-8"))
        validators[name] = validator_for(schema)(schema)
    errors = files = 0
    for root in sys.argv[2:]:
        for p in sorted(Path(root).rglob("*")):
            if p.suffix not in (".yaml", ".yml", ".json"):
                continue
            text = p.read_text(encoding="utf-8")
            doc = json.loads(text) if p.suffix == ".json" else yaml.load(text, Loader=yaml.CSafeLoader)
            kind = "deepspeed" if "deepspeed" in p.name else "peft-adapter" if "adapter" in p.name else "trainer"
            errors += sum(1 for _ in validators[kind].iter_errors(doc))
            files += 1
    print(files, "files", errors, "errors")


if __name__ == "__main__":
    main()
