"""cfgcheck: finds the mistakes in fine-tuning configs before the GPU run.

The Python API is importable from here (``cfgcheck.lint``, ``cfgcheck.guard``, ...); it is
loaded on first use, so ``import cfgcheck`` stays cheap.
"""

from types import MappingProxyType


__version__ = "0.1.0"

_API = ("lint", "lint_text", "lint_mapping", "guard", "ConfigRejected", "exit_code",
        "EXIT_CLEAN", "EXIT_FINDINGS", "EXIT_INPUT", "EXIT_INTERNAL")
_ELSEWHERE = MappingProxyType({"Finding": "findings", "Severity": "findings", "Report": "engine",
              "FileReport": "engine", "ProjectError": "project", "BaselineError": "baseline"})

__all__ = ("__version__", *_API, *_ELSEWHERE)


def __getattr__(name: str):
    import importlib

    if name in _API:
        return getattr(importlib.import_module(".api", __name__), name)
    if name in _ELSEWHERE:
        return getattr(importlib.import_module(f".{_ELSEWHERE[name]}", __name__), name)
    raise AttributeError(f"module 'cfgcheck' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
