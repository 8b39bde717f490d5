"""The decoder layer classes the FSDP wrap rule expects exist in transformers under those names."""

from __future__ import annotations

import importlib

import pytest

from cfgcheck.checks.distributed import DECODER_LAYER

pytest.importorskip("transformers")


@pytest.mark.parametrize("family,cls", sorted(DECODER_LAYER.items()))
def test_decoder_layer_class_is_in_the_models_module(family, cls):
    # transformers models/<family>/modeling_<family>.py defines the decoder layer class
    module = importlib.import_module(f"transformers.models.{family}.modeling_{family}")
    assert hasattr(module, cls), f"{module.__name__} has no {cls}"
