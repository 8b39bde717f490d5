"""Real GPU peak memory of short training steps against cfgcheck's estimate (a device script, not a test).

    python bench/gpu_memory.py [--out DIR] [--seq 2048] [--batch 2] [--only NAME]

One short run on a lent GPU: random-initialised llama-shaped models of two invented sizes (no
download; nothing is fetched), each trained for two steps (forward, loss, backward, AdamW step) in
every combination of

  method         full (bf16 weights) / LoRA r=16 all-linear (bf16 base, bf16 autocast) /
                 QLoRA (NF4 + double quantisation, bf16 compute; needs bitsandbytes)
  size           "0.35b" (h 1024, 24 layers, 0.35B parameters) / "1.1b" (h 2048, 22 layers, 1.1B)
  checkpointing  off / on
  attention      sdpa / flash_attention_2 (needs flash-attn; left out when it is not installed)

and records torch.cuda.max_memory_allocated and max_memory_reserved per run, the memory held by the
weights before training, and the CUDA context (device total - free - reserved at start). Beside
each measurement it prints cfgcheck's estimate for the same run with the runtime overhead set to 0,
so the table shows estimate / allocated peak, and the reserved - allocated gap and the context are
the figures the estimate's fixed overhead stands for (allocator slack, CUDA context, kernels'
workspaces such as flash-attention's).

Writes gpu_memory.json (one record per run, plus torch/transformers/peft/bitsandbytes versions and
the device name) to --out (default: $OUT when set, else the current folder) and prints a table.
Each run is isolated in its own try block: an out-of-memory or a missing package is recorded, not
fatal.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

SIZES = {  # invented llama-shaped configs
    "0.35b": dict(hidden_size=1024, intermediate_size=2816, num_hidden_layers=24, num_attention_heads=16,
                 num_key_value_heads=8, head_dim=64, vocab_size=32000),
    "1.1b": dict(hidden_size=2048, intermediate_size=5632, num_hidden_layers=22, num_attention_heads=32,
                 num_key_value_heads=8, head_dim=64, vocab_size=32000),
}
METHODS = ("full", "lora", "qlora")


def _have(name: str) -> bool:
    try:
        __import__(name)
        return True
    except Exception:
        return False


def _arch(cfg: dict):
    from cfgcheck.knowledge.models import Architecture

    return Architecture(family="llama", hidden_size=cfg["hidden_size"], intermediate_size=cfg["intermediate_size"],
                        num_layers=cfg["num_hidden_layers"], num_heads=cfg["num_attention_heads"],
                        num_kv_heads=cfg["num_key_value_heads"], head_dim=cfg["head_dim"],
                        vocab_size=cfg["vocab_size"], max_position_embeddings=4096, tie_word_embeddings=False,
                        torch_dtype="bfloat16")


def _estimate(cfg, method, ckpt, attention, batch, seq):
    from cfgcheck.knowledge.memory import MemoryInputs, estimate_memory

    return estimate_memory(MemoryInputs(
        arch=_arch(cfg), method=method, base_storage="nf4" if method == "qlora" else "bf16",
        double_quant=method == "qlora", mixed_precision=None, autocast=method != "full", micro_batch=batch,
        seq_len=seq, gradient_checkpointing=ckpt, fused_attention=True, lora_rank=16,
        lora_targets="all-linear", optimizer="adamw_torch", overhead_bytes=0,
    ))


def _one_run(torch, transformers, saved: Path, cfg, method, ckpt, attention, batch, seq) -> dict:
    import peft

    kwargs = dict(dtype=torch.bfloat16, attn_implementation=attention, device_map={"": 0})
    if method == "qlora":
        kwargs["quantization_config"] = transformers.BitsAndBytesConfig(
            load_in_4bit=True, bnb_4bit_quant_type="nf4", bnb_4bit_use_double_quant=True,
            bnb_4bit_compute_dtype=torch.bfloat16)
    model = transformers.AutoModelForCausalLM.from_pretrained(saved, **kwargs)
    if method != "full":
        model = peft.get_peft_model(model, peft.LoraConfig(r=16, lora_alpha=32, target_modules="all-linear"))
    if ckpt:
        model.gradient_checkpointing_enable()
    model.train()
    opt = torch.optim.AdamW([p for p in model.parameters() if p.requires_grad], lr=1e-5)
    torch.cuda.synchronize()
    held = torch.cuda.memory_allocated()
    torch.cuda.reset_peak_memory_stats()
    ids = torch.randint(3, cfg["vocab_size"], (batch, seq), device="cuda")
    t0 = time.perf_counter()
    for _ in range(2):  # the second step starts with the optimizer states allocated
        with torch.autocast("cuda", dtype=torch.bfloat16, enabled=method != "full"):
            loss = model(input_ids=ids, labels=ids).loss
        loss.backward()
        opt.step()
        opt.zero_grad(set_to_none=True)
    torch.cuda.synchronize()
    out = dict(weights_held=held, peak_allocated=torch.cuda.max_memory_allocated(),
               peak_reserved=torch.cuda.max_memory_reserved(), seconds=round(time.perf_counter() - t0, 2))
    del model, opt, loss, ids
    return out


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.environ.get("OUT", "."))
    ap.add_argument("--seq", type=int, default=2048)
    ap.add_argument("--batch", type=int, default=2)
    ap.add_argument("--only", default=None, help="run only setups whose name contains this")
    args = ap.parse_args()
    import torch
    import transformers

    if not torch.cuda.is_available():
        print("no CUDA device: nothing measured")
        return 1
    free0, total = torch.cuda.mem_get_info()
    meta = dict(device=torch.cuda.get_device_name(0), total_bytes=total,
                context_bytes=total - free0 - torch.cuda.memory_reserved(),
                torch=torch.__version__, transformers=transformers.__version__,
                peft=getattr(__import__("peft"), "__version__", None) if _have("peft") else None,
                bitsandbytes=getattr(__import__("bitsandbytes"), "__version__", None) if _have("bitsandbytes") else None,
                flash_attn=_have("flash_attn"), seq=args.seq, batch=args.batch)
    attentions = ["sdpa"] + (["flash_attention_2"] if meta["flash_attn"] else [])
    records = []
    with tempfile.TemporaryDirectory() as tmp:
        for size, cfg in SIZES.items():
            saved = Path(tmp) / size
            torch.manual_seed(0)
            hf = transformers.LlamaConfig(**cfg, max_position_embeddings=4096, tie_word_embeddings=False)
            transformers.AutoModelForCausalLM.from_config(hf, dtype=torch.bfloat16).save_pretrained(saved)
            for method in METHODS:
                for ckpt in (False, True):
                    for attention in attentions:
                        name = f"{method}-{size}-{'ckpt' if ckpt else 'nockpt'}-{attention}"
                        if args.only and args.only not in name:
                            continue
                        rec = dict(name=name, method=method, size=size, checkpointing=ckpt, attention=attention)
                        est = _estimate(cfg, method, ckpt, attention, args.batch, args.seq)
                        rec["estimate"] = {k: v for k, v in est.components()}
                        rec["estimate_total"] = est.total_bytes
                        if method == "qlora" and meta["bitsandbytes"] is None:
                            rec["error"] = "bitsandbytes not installed"
                        else:
                            try:
                                rec.update(_one_run(torch, transformers, saved, cfg, method, ckpt, attention,
                                                    args.batch, args.seq))
                            except Exception as exc:  # an OOM or a missing kernel is a result, not a crash
                                rec["error"] = f"{type(exc).__name__}: {str(exc)[:200]}"
                        gc.collect()
                        torch.cuda.empty_cache()
                        records.append(rec)
                        _print_row(rec)
    out = Path(args.out) / "gpu_memory.json"
    out.write_text(json.dumps(dict(meta=meta, runs=records), indent=1))
    print(f"\n{meta['device']}: CUDA context {meta['context_bytes'] / 2**30:.2f} GiB; wrote {out}")
    return 0


def _print_row(rec: dict) -> None:
    gib = 2**30
    if "error" in rec:
        print(f"{rec['name']:36s} {rec['error']}")
        return
    ratio = rec["estimate_total"] / rec["peak_allocated"]
    print(f"{rec['name']:36s} est {rec['estimate_total'] / gib:7.2f} GiB  allocated {rec['peak_allocated'] / gib:7.2f}"
          f"  reserved {rec['peak_reserved'] / gib:7.2f}  est/alloc {ratio:.3f}")


if __name__ == "__main__":
    sys.exit(main())
