"""What the fixer writes is read as intended by PyYAML (YAML 1.1), ruamel.yaml (YAML 1.2) and json.

The claims are checked against the reference libraries themselves, not against our loader.
"""

from __future__ import annotations

import io
import json
import math

import pytest
import yaml
from hypothesis import given, strategies as st

from cfgcheck import fix
from cfgcheck.fix.values import _float_text, _yaml_str

ruamel_yaml = pytest.importorskip("ruamel.yaml")


def pyyaml(text):
    return yaml.safe_load(text)


def yaml12(text):
    return ruamel_yaml.YAML(typ="safe", pure=True).load(io.StringIO(text))


@pytest.mark.parametrize("text,v11,v12", [
    # PyYAML lib/yaml/resolver.py float regex: a dot in the mantissa and a sign in the exponent
    ("1e-4", "1e-4", 0.0001),
    ("1.0e4", "1.0e4", 10000.0),
    ("1.0e-4", 0.0001, 0.0001),
    ("1.0e+4", 10000.0, 10000.0),
    ("5.0e-5", 5e-05, 5e-05),
    ("1.0E-2", 0.01, 0.01),
    # YAML 1.1 bool type (yaml.org/type/bool.html) vs YAML 1.2.2 sec. 10.3.2 core schema
    ("yes", True, "yes"),
    ("No", False, "No"),
    ("on", True, "on"),
    ("true", True, True),
    ("false", False, False),
])
def test_reference_readers(text, v11, v12):
    got11, got12 = pyyaml(f"k: {text}\n")["k"], yaml12(f"k: {text}\n")["k"]
    assert (type(got11), got11) == (type(v11), v11)
    assert (type(got12), got12) == (type(v12), v12)


def test_the_exponent_fix_is_what_the_rule_hints():
    """The yaml-version rule hints `1.0e-4` for `1e-4`; the fixer writes exactly that text."""
    from cfgcheck import api

    result = fix.fix_text("learning_rate: 1e-4\nnum_train_epochs: 1\n", "a.yaml", api.make_options())
    assert result.new_text == "learning_rate: 1.0e-4\nnum_train_epochs: 1\n"
    assert pyyaml(result.new_text)["learning_rate"] == 0.0001  # PyYAML 6: float
    assert yaml12(result.new_text)["learning_rate"] == 0.0001  # ruamel.yaml, YAML 1.2: float


finite = st.floats(allow_nan=False, allow_infinity=False, min_value=-1e300, max_value=1e300)


@given(value=finite, like=st.sampled_from(["", "1e-4", "2.0E-5", "0.001", "3"]))
def test_every_float_we_write_reads_back_exactly(value, like):
    """Any float, in either style, is the same float to PyYAML, YAML 1.2 and JSON (RFC 8259)."""
    text = _float_text(value, like)
    for reader in (lambda t: pyyaml(f"k: {t}\n")["k"], lambda t: yaml12(f"k: {t}\n")["k"],
                   lambda t: json.loads(t)):
        got = reader(text)
        assert isinstance(got, float) and (got == value or (value == 0 and got == 0)), (text, got)
        assert math.copysign(1, got) == math.copysign(1, value) or value == 0


@given(st.text(st.characters(blacklist_categories=("Cs",)), max_size=20),
       st.sampled_from([None, "'", '"']))
def test_every_string_we_write_reads_back_exactly(value, quote):
    text = _yaml_str(value, quote)
    assert pyyaml(f"k: {text}\n")["k"] == value
    assert yaml12(f"k: {text}\n")["k"] == value


def test_what_a_single_quoted_scalar_refuses_is_every_character_outside_the_kept_ranges():
    """The fixer quotes a text in single quotes only when it holds none of these; checked on every
    code point against the ranges it keeps (YAML 1.2 sec. 5.1 c-printable without line breaks,
    and without the byte order mark U+FEFF)."""
    from cfgcheck.fix.values import _NOT_SINGLE

    kept = ((0x09, 0x09), (0x20, 0x7E), (0xA0, 0xD7FF), (0xE000, 0xFEFE), (0xFF00, 0xFFFD),
            (0x10000, 0x10FFFF))
    refused = [c for c in range(0x110000) if _NOT_SINGLE.match(chr(c))]
    expected = [c for c in range(0x110000) if not any(lo <= c <= hi for lo, hi in kept)]
    assert refused == expected
    assert len(refused) == 9 + 22 + 33 + 2048 + 3  # 00-08, 0A-1F, 7F-9F, surrogates, FEFF FFFE FFFF
