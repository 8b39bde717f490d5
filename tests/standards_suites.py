"""Runs the loader over every case of the YAML test suite and the JSON parsing test suite.

Used by tests/test_standards_suites.py; also runnable to print the figures recorded in
docs/robustness.md: ``python -m tests.standards_suites``.
"""

from __future__ import annotations

import signal
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from cfgcheck import load

SHARED = Path(__file__).resolve().parents[1].parent / "shared"
YAML_SUITE = SHARED / "standards" / "yaml-test-suite"
JSON_SUITE = SHARED / "standards" / "json-test-suite"
CASE_SECONDS = 20  # a hang guard per case, far above any real parse (not a speed target)


class Hang(Exception):
    pass


@contextmanager
def hang_guard(seconds: int):
    def fire(signum, frame):
        raise Hang(f"still running after {seconds} s")

    old = signal.signal(signal.SIGALRM, fire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


@dataclass
class Tally:
    cases: int = 0
    agree: int = 0  # accepted where the suite says valid, refused where it says invalid
    accepted_invalid: list[str] = field(default_factory=list)
    refused_valid: list[str] = field(default_factory=list)
    undecided_accepted: int = 0  # JSON i_ cases: implementation-defined
    undecided_refused: int = 0
    crashes: list[str] = field(default_factory=list)  # anything but a LoadError
    slowest: float = 0.0
    seconds: float = 0.0


def _accepts(raw: bytes, name: str, fmt: str) -> bool:
    """True when the loader accepts the bytes; False for a LoadError; anything else propagates."""
    try:
        src = load.decode(raw, name)
        load.load_text(src.text, name, fmt)
    except load.LoadError as exc:
        assert "\n" not in exc.reason and exc.line >= 1 and exc.column >= 1, (name, exc.reason)
        return False
    return True


def _run(tally: Tally, raw: bytes, name: str, fmt: str, valid: bool | None) -> None:
    tally.cases += 1
    start = time.perf_counter()
    try:
        with hang_guard(CASE_SECONDS):
            ok = _accepts(raw, name, fmt)
    except Exception as exc:  # every escape is what we count
        tally.crashes.append(f"{name}: {type(exc).__name__}: {exc}")
        return
    finally:
        spent = time.perf_counter() - start
        tally.seconds += spent
        tally.slowest = max(tally.slowest, spent)
    if valid is None:
        if ok:
            tally.undecided_accepted += 1
        else:
            tally.undecided_refused += 1
    elif ok == valid:
        tally.agree += 1
    elif ok:
        tally.accepted_invalid.append(name)
    else:
        tally.refused_valid.append(name)


def yaml_cases(root: Path = YAML_SUITE):
    for path in sorted(root.rglob("in.yaml")):
        yield path, not (path.parent / "error").exists()


def run_yaml_suite(root: Path = YAML_SUITE) -> Tally:
    tally = Tally()
    for path, valid in yaml_cases(root):
        _run(tally, path.read_bytes(), str(path.parent.relative_to(root)) + "/in.yaml", "yaml", valid)
    return tally


def run_json_suite(root: Path = JSON_SUITE) -> Tally:
    tally = Tally()
    for path in sorted(root.glob("*.json")):
        verdict = {"y": True, "n": False}.get(path.name[0])
        _run(tally, path.read_bytes(), path.name, "json", verdict)
    return tally


if __name__ == "__main__":
    for title, fn in (("YAML test suite", run_yaml_suite), ("JSON parsing test suite", run_json_suite)):
        t = fn()
        decided = t.cases - t.undecided_accepted - t.undecided_refused
        print(f"{title}: {t.cases} cases, agree {t.agree}/{decided}, accepted-invalid "
              f"{len(t.accepted_invalid)}, refused-valid {len(t.refused_valid)}, implementation-defined "
              f"accepted {t.undecided_accepted} refused {t.undecided_refused}, crashes {len(t.crashes)}, "
              f"total {t.seconds:.2f} s, slowest {t.slowest * 1000:.1f} ms")
        for c in t.crashes[:20]:
            print("  CRASH", c)
