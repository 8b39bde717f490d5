"""total_parameters and the module tree against transformers' own models, built on the meta device."""

import pytest
import torch
import transformers

from cfgcheck.knowledge.models import catalogue, module_table, total_parameters

from .conftest import hf_config

# One representative per distinct shape in the bundled catalogue.
_DISTINCT = {}
for _ref, _arch in catalogue().items():
    _DISTINCT.setdefault(_arch, _ref)
CASES = sorted(((ref, arch) for arch, ref in _DISTINCT.items()), key=lambda x: x[0])


def _meta_model(arch):
    with torch.device("meta"):
        return transformers.AutoModelForCausalLM.from_config(hf_config(arch))


@pytest.mark.parametrize("ref,arch", CASES, ids=[c[0] for c in CASES])
def test_total_equals_transformers_num_parameters(ref, arch):
    # reference: transformers' PreTrainedModel.num_parameters() on a model built from the same shapes
    model = _meta_model(arch)
    assert total_parameters(arch) == model.num_parameters()


@pytest.mark.parametrize("ref,arch", CASES, ids=[c[0] for c in CASES])
def test_module_tree_matches_named_modules(ref, arch):
    # reference: transformers' named_modules() names and parameter shapes; PEFT matches targets on these names
    small = arch.__class__(**{**arch.__dict__, "num_layers": 2})
    model = _meta_model(small)
    theirs = [(n, {p: tuple(t.shape) for p, t in m.named_parameters(recurse=False)}) for n, m in model.named_modules() if n]
    ours = [(n, {p: tuple(s) for p, s in params.items()}) for n, _kind, params in module_table(small)]
    assert ours == theirs
