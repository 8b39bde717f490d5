"""The GPU table against the published compute-capability table and feature gates."""

from __future__ import annotations

import pytest

from cfgcheck.knowledge.hardware import GB, GPUS, UnknownGpu, find_gpu

# NVIDIA "CUDA GPU Compute Capability" table (current and legacy pages, as recorded in
# REFERENCES.md sec. 8); A10G: third-party catalogue, not in NVIDIA's excerpt.
PUBLISHED_CC = {
    "p100": (6, 0), "v100-16gb": (7, 0), "v100-32gb": (7, 0), "t4": (7, 5), "a100-40gb": (8, 0),
    "a100-80gb": (8, 0), "a10": (8, 6), "a10g": (8, 6), "a6000": (8, 6), "rtx-3090": (8, 6),
    "rtx-4090": (8, 9), "l4": (8, 9), "l40s": (8, 9), "h100": (9, 0), "h200": (9, 0), "b200": (10, 0),
}
# Memory: vendor/cloud specs as recorded in REFERENCES.md sec. 8 (A10, L40S and P100 are from memory there).
PUBLISHED_GB = {"t4": 16, "v100-16gb": 16, "v100-32gb": 32, "a100-40gb": 40, "a100-80gb": 80, "l4": 24,
                "a10g": 24, "rtx-3090": 24, "rtx-4090": 24, "a6000": 48, "h100": 80, "h200": 141, "b200": 180}


@pytest.mark.parametrize("name,cc", sorted(PUBLISHED_CC.items()))
def test_compute_capability(name, cc):
    assert find_gpu(name).capability == cc


@pytest.mark.parametrize("name,gb", sorted(PUBLISHED_GB.items()))
def test_memory(name, gb):
    assert find_gpu(name).memory_bytes == gb * GB


def test_every_gpu_is_in_the_published_table():
    assert set(GPUS) == set(PUBLISHED_CC)


@pytest.mark.parametrize("name,bf16,tf32,fp8", [
    # bf16/TF32 need CC 8.0 (Transformer Engine matrix; transformers is_torch_tf32_available),
    # FP8 needs 8.9 (Transformer Engine matrix)
    ("t4", False, False, False), ("v100-32gb", False, False, False), ("a100-80gb", True, True, False),
    ("a10g", True, True, False), ("l4", True, True, True), ("rtx-4090", True, True, True), ("h100", True, True, True),
])
def test_feature_gates(name, bf16, tf32, fp8):
    g = find_gpu(name)
    assert (g.supports("bf16"), g.supports("tf32"), g.supports("fp8")) == (bf16, tf32, fp8)


@pytest.mark.parametrize("alias,canonical", [("A100", "a100-80gb"), ("NVIDIA A100-SXM4-80GB", "a100-80gb"),
                                             ("Tesla T4", "t4"), ("RTX 4090", "rtx-4090"), ("v100", "v100-16gb")])
def test_aliases(alias, canonical):
    assert find_gpu(alias).name == canonical


def test_unknown_gpu_names_the_nearest():
    with pytest.raises(UnknownGpu) as err:
        find_gpu("a100-8gb")
    assert "a100-80gb" in err.value.suggestions and "a100-80gb" in str(err.value)
