"""Model-state bytes (weights, gradients, optimizer states) against tensors torch actually allocates.

A tiny random model takes one optimizer step on CPU; we sum the bytes of its parameters, their
gradients and the optimizer's state tensors and compare with the estimate's components.
Reference: torch 2.13 optimizers, transformers' Adafactor, PEFT get_peft_model.
"""

import warnings

import peft
import pytest
import torch
import transformers

from cfgcheck.knowledge.memory import MemoryInputs, estimate_memory
from cfgcheck.knowledge.models import Architecture

from .conftest import hf_config

ARCH = Architecture(
    family="llama", hidden_size=64, intermediate_size=96, num_layers=2, num_heads=4, num_kv_heads=2, head_dim=16,
    vocab_size=128, max_position_embeddings=64, tie_word_embeddings=False, torch_dtype=None,
)


def make_optimizer(name, params, momentum):
    if name == "adamw_torch":
        return torch.optim.AdamW(params, lr=1e-3)
    if name == "sgd":
        return torch.optim.SGD(params, lr=1e-3, momentum=momentum)
    if name == "adafactor":
        return transformers.optimization.Adafactor(params, lr=1e-3, relative_step=False, scale_parameter=False)
    raise AssertionError(name)


def measured_states(model, opt_name, momentum=0.0):
    params = [p for p in model.parameters() if p.requires_grad]
    opt = make_optimizer(opt_name, params, momentum)
    ids = torch.randint(3, ARCH.vocab_size, (1, 8))
    model(input_ids=ids, labels=ids).loss.backward()
    opt.step()
    seen = {}
    for p in model.parameters():
        seen[p.untyped_storage().data_ptr()] = p.untyped_storage().nbytes()
    weights = sum(seen.values())
    grads = sum(p.grad.nbytes for p in params if p.grad is not None)
    states = sum(
        t.nbytes for s in opt.state.values() for t in s.values() if isinstance(t, torch.Tensor) and t.dim() > 0
    )
    return weights, grads, states


@pytest.mark.parametrize(
    "dtype,opt,momentum",
    [(torch.float32, "adamw_torch", 0.0), (torch.bfloat16, "adamw_torch", 0.0), (torch.float32, "sgd", 0.9),
     (torch.float32, "sgd", 0.0), (torch.float32, "adafactor", 0.0), (torch.bfloat16, "adafactor", 0.0)],
    ids=["fp32-adamw", "bf16-adamw", "sgd-momentum", "sgd-plain", "adafactor", "bf16-adafactor"],
)
def test_full_finetune_states_equal_torch(dtype, opt, momentum):
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(hf_config(ARCH)).to(dtype)
    w, g, s = measured_states(model, opt, momentum)
    storage = "fp32" if dtype == torch.float32 else "bf16"
    # no autocast: states and gradients in the weights' dtype (mixed_precision=None)
    est = estimate_memory(MemoryInputs(arch=ARCH, method="full", base_storage=storage, mixed_precision=None,
                                       optimizer=opt, sgd_momentum=momentum))
    assert (est.weights_bytes, est.gradients_bytes, est.optimizer_bytes, est.master_weights_bytes) == (w, g, s, 0)


@pytest.mark.parametrize("mts", [None, ["lm_head"]], ids=["adapters", "adapters+lm_head-copy"])
@pytest.mark.parametrize("opt", ["adamw_torch", "sgd"])
def test_lora_states_on_bf16_base_equal_torch(mts, opt):
    torch.manual_seed(0)
    model = transformers.AutoModelForCausalLM.from_config(hf_config(ARCH)).to(torch.bfloat16)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pm = peft.get_peft_model(model, peft.LoraConfig(r=4, target_modules="all-linear", modules_to_save=mts))
    w, g, s = measured_states(pm, opt, momentum=0.9)
    est = estimate_memory(MemoryInputs(arch=ARCH, method="lora", lora_rank=4, lora_targets="all-linear",
                                       modules_to_save=tuple(mts or ()), optimizer=opt, sgd_momentum=0.9))
    assert (est.weights_bytes, est.gradients_bytes, est.optimizer_bytes) == (w, g, s)
