"""Values as YAML or JSON text, in the style of the text they replace: the number style
(exponent or decimal), the quoting, a plain word where YAML reads it back as the same word."""

from __future__ import annotations

import json
import re
from decimal import Decimal
from typing import Any

import yaml

from ..load import Entry


try:
    from yaml import CSafeLoader as _Scanner
except ImportError:  # pragma: no cover - depends on how PyYAML was built
    from yaml import SafeLoader as _Scanner  # type: ignore[assignment]


class _Unplaceable(Exception):
    """An edit cannot be made as a span edit here (merge key, block list rewritten, ...)."""


_EXP_NO_DOT = re.compile(r"([-+]?)([0-9]+)(\.[0-9]*)?([eE])([-+]?)([0-9]+)")
_PLAIN_STR = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-/]*")


def _float_text(value: float, like: str = "") -> str:
    """A float in the file's style: exponent form when the old text used one, else decimal.

    Exponent form always has a dot in the mantissa and a sign in the exponent (``5.0e-5``,
    ``1.0e+4``): YAML 1.1 (PyYAML) needs both to read a float, YAML 1.2 and JSON accept it.
    """
    if value != value or value in (float("inf"), float("-inf")):
        raise _Unplaceable("not a finite number")
    m = _EXP_NO_DOT.fullmatch(like)
    if m is not None and float(like) == value:  # "12e-5" -> "12.0e-5": the author's digits stay
        sign, whole, frac, letter, esign, digits = m.groups()
        return f"{sign}{whole}{frac if frac and frac != '.' else '.0'}{letter}{esign or '+'}{digits}"
    d = Decimal(repr(float(value)))
    sign, digits, exp = d.as_tuple()
    low = like.lower()
    use_exp = ("e" in low) if like and not low.startswith("0x") else (
        value != 0 and (abs(value) < 1e-4 or abs(value) >= 1e16))
    if use_exp:
        ds = "".join(map(str, digits)).rstrip("0") or "0"
        e10 = exp + len(digits) - 1 if value != 0 else 0
        mant = ds[0] + "." + (ds[1:] or "0")
        letter = "E" if "E" in like else "e"
        return f"{'-' if sign else ''}{mant}{letter}{'-' if e10 < 0 else '+'}{abs(e10)}"
    text = format(d, "f")
    return text if "." in text else text + ".0"


def _yaml_str(value: str, quote: str | None) -> str:
    if quote is None and _PLAIN_STR.fullmatch(value) and value.lower() not in ("y", "n"):
        try:
            if yaml.load(value, Loader=_Scanner) == value:
                return value
        except yaml.YAMLError:
            pass
    if quote == "'" and not _NOT_SINGLE.search(value):
        return "'" + value.replace("'", "''") + "'"
    # JSON's escapes are YAML's too; YAML also breaks lines at NEL, LS, PS and refuses the rest
    return _NOT_DOUBLE.sub(lambda m: f"\\u{ord(m.group()):04x}", json.dumps(value, ensure_ascii=False))


# what a single-quoted YAML scalar cannot hold as is: line breaks and non-printable characters,
# every character outside TAB, 20-7E, A0-D7FF, E000-FEFE, FF00-FFFD and 10000-10FFFF (the byte
# order mark FEFF left out too); written as those gaps, which compiles in a fifth of the time of
# the negated class of the kept ranges (tests/test_fix_yaml_claims.py compares the two on every code point)
_NOT_SINGLE = re.compile("[\x00-\x08\x0a-\x1f\x7f-\x9f\ud800-\udfff\ufeff\ufffe\uffff]")
# what a double-quoted one must escape beyond JSON's escapes (json.dumps handles < 0x20)
_NOT_DOUBLE = re.compile("[\x7f-\x9f\u2028\u2029\ufeff\ufffe\uffff]")


def _render(value: Any, fmt: str, like: Entry | None = None, raw: str = "") -> str:
    """A value as YAML or JSON text, in the style of the value it replaces (``like``)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return _float_text(value, raw if like is not None and like.style in (None, "json") else "")
    if isinstance(value, str):
        if fmt == "json":
            return json.dumps(value, ensure_ascii=False)
        quote = like.style if like is not None and like.style in ("'", '"') else None
        return _yaml_str(value, quote)
    if isinstance(value, list):
        return "[" + ", ".join(_render(v, fmt, like) for v in value) + "]"
    if isinstance(value, dict):
        items = (f"{_render_key(k, fmt)}: {_render(v, fmt, like)}" for k, v in value.items())
        return "{" + ", ".join(items) + "}"
    raise _Unplaceable(f"cannot write a {type(value).__name__}")


def _render_key(key: Any, fmt: str, like_raw: str = "") -> str:
    if fmt == "json":
        return json.dumps(str(key), ensure_ascii=False)
    quote = like_raw[:1] if like_raw[:1] in ("'", '"') else None
    return _yaml_str(str(key), quote)
