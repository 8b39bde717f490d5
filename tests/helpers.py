"""Small helpers: lint a text and get (rule, key, line) back."""

from __future__ import annotations

from cfgcheck import api
from cfgcheck.findings import Severity


def lint(text: str, name: str = "case.yaml", fmt: str | None = None, **options):
    return api.lint_text(text, name, fmt=fmt, **options)


def found(text: str, name: str = "case.yaml", fmt: str | None = None, min_severity=Severity.WARNING,
          **options) -> list[tuple[str, str]]:
    """(rule, key) of every finding at or above min_severity."""
    report = lint(text, name, fmt, **options)
    assert report.problem is None, report.problem
    return sorted((f.rule, f.key) for f in report.findings if f.severity >= min_severity)


# Llama 2 7B's config.json (meta-llama/Llama-2-7b-hf), from memory; and a smaller model of the
# same family, for tests where a checkpoint folder's config.json changes between two lints
LLAMA2_7B_CONFIG = {"model_type": "llama", "hidden_size": 4096, "intermediate_size": 11008,
                    "num_hidden_layers": 32, "num_attention_heads": 32, "num_key_value_heads": 32,
                    "vocab_size": 32000, "max_position_embeddings": 4096, "tie_word_embeddings": False,
                    "torch_dtype": "bfloat16"}
SMALLER_LLAMA_CONFIG = dict(LLAMA2_7B_CONFIG, hidden_size=1024, intermediate_size=2816, num_hidden_layers=8,
                            num_attention_heads=16, num_key_value_heads=16)
