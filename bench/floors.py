"""The floors cfgcheck is measured against (a script run by bench/run.py, not a test).

    python bench/floors.py load|compose|sha256 FOLDER...

Each walks the folders for .yaml / .yml / .json files in sorted order, as a user's own loop would,
and does only its one thing per file:

  load     yaml.load with PyYAML's C loader (CSafeLoader): parse and build Python objects
  compose  yaml.compose with the C loader: parse into nodes only (no Python objects)
  sha256   read the bytes and hash them (what a cache that knows nothing must do at least)

It prints the number of files.
"""

import sys
from pathlib import Path

SUFFIXES = (".yaml", ".yml", ".json")


def files(roots):
    for root in roots:
        p = Path(root)
        if p.is_file():
            yield p
            continue
        yield from sorted(f for f in p.rglob("*") if f.suffix in SUFFIXES and f.is_file())


def main() -> None:
    mode, roots = sys.argv[1], sys.argv[2:]
    n = 0
    if mode == "sha256":
        import hashlib

        for f in files(roots):
            hashlib.sha256(f.read_bytes()).digest()
            n += 1
    else:
        import yaml

        step = yaml.load if mode == "load" else yaml.compose
        for f in files(roots):
            step(f.read_text(encoding="utf-8"), Loader=yaml.CSafeLoader)
            n += 1
    print(n)


if __name__ == "__main__":
    main()
