"""Writes cfgcheck/knowledge/base_models.json, the bundled model catalogue, from the table below.

Each row: id, family, layers, hidden, FFN, heads, KV heads, head dim, vocabulary, tied, context window, stored
dtype, the published total and where it is published, where the shapes come from, other ids of the same shape,
and family-specific fields. "from memory" marks values not checked against a primary copy. Run
`python tools/write_model_catalogue.py` after editing; tests/test_models.py and
tests/reference/test_transformers_counts.py check every entry.
"""

import json
from pathlib import Path

M = "from memory"
HUB = "Hub model page parameter count, from memory"
rows = []
def add(id, family, L, h, I, H, KV, d, V, tie, ctx, dtype, pub=None, pubsrc=None, src=M, aliases=(), **extra):
    e = {"id": id}
    if aliases: e["aliases"] = list(aliases)
    e.update(family=family, num_layers=L, hidden_size=h, intermediate_size=I, num_heads=H, num_kv_heads=KV, head_dim=d,
             vocab_size=V, tie_word_embeddings=tie, max_position_embeddings=ctx, torch_dtype=dtype)
    e.update(extra)
    e["source"] = src
    if pub is not None or pubsrc:
        e["published_total"] = pub
        e["published_source"] = pubsrc
    rows.append(e)

R13 = "shared REFERENCES sec. 13 [V2]"
# ---- Llama 2 / Code Llama
add("meta-llama/Llama-2-7b-hf", "llama", 32, 4096, 11008, 32, 32, 128, 32000, False, 4096, "float16",
    6738415616, R13 + ": num_parameters()", R13 + ": config copies, Touvron et al. 2023 Table 1 (MHA at 7B); torch_dtype from memory",
    aliases=["meta-llama/Llama-2-7b-chat-hf", "meta-llama/Llama-2-7b"])
add("meta-llama/Llama-2-13b-hf", "llama", 40, 5120, 13824, 40, 40, 128, 32000, False, 4096, "float16",
    13015864320, R13 + ": num_parameters()", R13 + ": total; shapes and torch_dtype from memory, reproduce that total",
    aliases=["meta-llama/Llama-2-13b-chat-hf"])
add("meta-llama/Llama-2-70b-hf", "llama", 80, 8192, 28672, 64, 8, 128, 32000, False, 4096, "float16",
    68976648192, "from memory (num_parameters() of Llama-2-70b-hf)", "Touvron et al. 2023 Table 1 (GQA at 70B); other shapes from memory",
    aliases=["meta-llama/Llama-2-70b-chat-hf"])
add("codellama/CodeLlama-7b-hf", "llama", 32, 4096, 11008, 32, 32, 128, 32016, False, 16384, "bfloat16",
    6_740_000_000, HUB + " (6.74B)", aliases=["codellama/CodeLlama-7b-Instruct-hf", "codellama/CodeLlama-7b-Python-hf"])
add("codellama/CodeLlama-13b-hf", "llama", 40, 5120, 13824, 40, 40, 128, 32016, False, 16384, "bfloat16",
    13_000_000_000, HUB + " (13.0B)", aliases=["codellama/CodeLlama-13b-Instruct-hf"])
add("codellama/CodeLlama-34b-hf", "llama", 48, 8192, 22016, 64, 8, 128, 32000, False, 16384, "bfloat16",
    33_700_000_000, HUB + " (33.7B)", aliases=["codellama/CodeLlama-34b-Instruct-hf"])
# ---- Llama 3 family
L3 = R13 + " and Llama Team 2024 Table 3: 32 layers, 4096, 14336, 32 heads, 8 KV heads, vocab 128256"
add("meta-llama/Meta-Llama-3-8B", "llama", 32, 4096, 14336, 32, 8, 128, 128256, False, 8192, "bfloat16",
    8030261248, R13, L3 + ", context 8192", aliases=["meta-llama/Meta-Llama-3-8B-Instruct"])
add("meta-llama/Meta-Llama-3-70B", "llama", 80, 8192, 28672, 64, 8, 128, 128256, False, 8192, "bfloat16",
    70_600_000_000, HUB + " (70.6B)", "Llama Team 2024 Table 3 (80 layers, 8192, 28672, 64 heads, 8 KV heads); context from memory",
    aliases=["meta-llama/Meta-Llama-3-70B-Instruct"])
add("meta-llama/Llama-3.1-8B", "llama", 32, 4096, 14336, 32, 8, 128, 128256, False, 131072, "bfloat16",
    8030261248, R13 + ": same total as Meta-Llama-3-8B (HF API)", R13 + ": same shapes as Meta-Llama-3-8B; max_position_embeddings 131072 from memory",
    aliases=["meta-llama/Meta-Llama-3.1-8B", "meta-llama/Llama-3.1-8B-Instruct", "meta-llama/Meta-Llama-3.1-8B-Instruct"])
add("meta-llama/Llama-3.1-70B", "llama", 80, 8192, 28672, 64, 8, 128, 128256, False, 131072, "bfloat16",
    70_600_000_000, HUB + " (70.6B)", "Llama Team 2024 Table 3; context from memory",
    aliases=["meta-llama/Meta-Llama-3.1-70B", "meta-llama/Llama-3.1-70B-Instruct", "meta-llama/Meta-Llama-3.1-70B-Instruct"])
add("meta-llama/Llama-3.1-405B", "llama", 126, 16384, 53248, 128, 8, 128, 128256, False, 131072, "bfloat16",
    405_900_000_000, HUB + " (406B; 405.9B)", "Llama Team 2024 Table 3 (126 layers, 16384, 53248, 128 heads, 8 KV heads)",
    aliases=["meta-llama/Meta-Llama-3.1-405B", "meta-llama/Llama-3.1-405B-Instruct", "meta-llama/Meta-Llama-3.1-405B-Instruct"])
add("meta-llama/Llama-3.2-1B", "llama", 16, 2048, 8192, 32, 8, 64, 128256, True, 131072, "bfloat16",
    1_235_814_400, "from memory (num_parameters())", aliases=["meta-llama/Llama-3.2-1B-Instruct"])
add("meta-llama/Llama-3.2-3B", "llama", 28, 3072, 8192, 24, 8, 128, 128256, True, 131072, "bfloat16",
    3_210_000_000, HUB + " (3.21B)", aliases=["meta-llama/Llama-3.2-3B-Instruct"])
add("meta-llama/Llama-3.3-70B-Instruct", "llama", 80, 8192, 28672, 64, 8, 128, 128256, False, 131072, "bfloat16",
    70_600_000_000, HUB + " (70.6B)", "from memory (same shapes as Llama-3.1-70B)")
# ---- Mistral
add("mistralai/Mistral-7B-v0.1", "mistral", 32, 4096, 14336, 32, 8, 128, 32000, False, 32768, "bfloat16",
    7241732096, R13 + ": GGUF general.parameter_count", R13 + ": GQA 32/8, vocab 32000, sliding_window 4096, intermediate 14336; max_position_embeddings from memory",
    aliases=["mistralai/Mistral-7B-Instruct-v0.1"], sliding_window=4096)
add("mistralai/Mistral-7B-Instruct-v0.2", "mistral", 32, 4096, 14336, 32, 8, 128, 32000, False, 32768, "bfloat16",
    7241732096, R13 + ": same shapes as Mistral-7B-v0.1", "from memory: v0.1 shapes without the sliding window")
add("mistralai/Mistral-7B-v0.3", "mistral", 32, 4096, 14336, 32, 8, 128, 32768, False, 32768, "bfloat16",
    7_250_000_000, HUB + " (7.25B)", "from memory: v0.1 shapes, vocabulary extended to 32768",
    aliases=["mistralai/Mistral-7B-Instruct-v0.3"])
add("mistralai/Mistral-Nemo-Base-2407", "mistral", 40, 5120, 14336, 32, 8, 128, 131072, False, 1024000, "bfloat16",
    12_200_000_000, HUB + " (12.2B)", aliases=["mistralai/Mistral-Nemo-Instruct-2407"])
add("mistralai/Mistral-Small-Instruct-2409", "mistral", 56, 6144, 16384, 48, 8, 128, 32768, False, 32768, "bfloat16",
    22_200_000_000, HUB + " (22.2B)")
add("mistralai/Mistral-Small-24B-Base-2501", "mistral", 40, 5120, 32768, 32, 8, 128, 131072, False, 32768, "bfloat16",
    23_600_000_000, HUB + " (23.6B)", aliases=["mistralai/Mistral-Small-24B-Instruct-2501"])
add("mistralai/Ministral-8B-Instruct-2410", "mistral", 36, 4096, 12288, 32, 8, 128, 131072, False, 32768, "bfloat16",
    8_020_000_000, HUB + " (8.02B)")
add("mistralai/Mixtral-8x7B-v0.1", "mixtral", 32, 4096, 14336, 32, 8, 128, 32000, False, 32768, "bfloat16",
    46_702_792_704, "from memory (num_parameters(); Mistral AI announces 46.7B total, 12.9B active)",
    aliases=["mistralai/Mixtral-8x7B-Instruct-v0.1"], num_experts=8, experts_per_token=2)
add("mistralai/Mixtral-8x22B-v0.1", "mixtral", 56, 6144, 16384, 48, 8, 128, 32000, False, 65536, "bfloat16",
    140_600_000_000, HUB + " (141B; 140.6B)", aliases=["mistral-community/Mixtral-8x22B-v0.1", "mistralai/Mixtral-8x22B-Instruct-v0.1"],
    num_experts=8, experts_per_token=2)
# ---- Qwen 1.5
QC = "Qwen model card 'Number of Parameters', from memory"
add("Qwen/Qwen1.5-0.5B", "qwen2", 24, 1024, 2816, 16, 16, 64, 151936, True, 32768, "bfloat16", 464_000_000, HUB + " (464M)", aliases=["Qwen/Qwen1.5-0.5B-Chat"])
add("Qwen/Qwen1.5-1.8B", "qwen2", 24, 2048, 5504, 16, 16, 128, 151936, False, 32768, "bfloat16", 1_840_000_000, HUB + " (1.84B)", aliases=["Qwen/Qwen1.5-1.8B-Chat"])
add("Qwen/Qwen1.5-4B", "qwen2", 40, 2560, 6912, 20, 20, 128, 151936, False, 32768, "bfloat16", 3_950_000_000, HUB + " (3.95B)", aliases=["Qwen/Qwen1.5-4B-Chat"])
add("Qwen/Qwen1.5-7B", "qwen2", 32, 4096, 11008, 32, 32, 128, 151936, False, 32768, "bfloat16", 7_720_000_000, HUB + " (7.72B)", aliases=["Qwen/Qwen1.5-7B-Chat"])
add("Qwen/Qwen1.5-14B", "qwen2", 40, 5120, 13696, 40, 40, 128, 152064, False, 32768, "bfloat16", 14_200_000_000, HUB + " (14.2B)", aliases=["Qwen/Qwen1.5-14B-Chat"])
add("Qwen/Qwen1.5-32B", "qwen2", 64, 5120, 27392, 40, 8, 128, 152064, False, 32768, "bfloat16", 32_500_000_000, HUB + " (32.5B)", aliases=["Qwen/Qwen1.5-32B-Chat"])
add("Qwen/Qwen1.5-72B", "qwen2", 80, 8192, 24576, 64, 64, 128, 152064, False, 32768, "bfloat16", 72_300_000_000, HUB + " (72.3B)", aliases=["Qwen/Qwen1.5-72B-Chat"])
add("Qwen/Qwen1.5-MoE-A2.7B", "qwen2_moe", 24, 2048, 5632, 16, 16, 128, 151936, False, 8192, "bfloat16",
    14_300_000_000, "Qwen blog 'Qwen1.5-MoE: 1/3 activated parameters', 14.3B total, from memory",
    aliases=["Qwen/Qwen1.5-MoE-A2.7B-Chat"], num_experts=60, experts_per_token=4, expert_intermediate_size=1408,
    shared_expert_intermediate_size=5632)
# ---- Qwen 2
add("Qwen/Qwen2-0.5B", "qwen2", 24, 896, 4864, 14, 2, 64, 151936, True, 32768, "bfloat16", 494032768, R13 + ": same shapes as Qwen2.5-0.5B", "from memory (same shapes as Qwen2.5-0.5B)", aliases=["Qwen/Qwen2-0.5B-Instruct"])
add("Qwen/Qwen2-1.5B", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, True, 32768, "bfloat16", 1543714304, R13 + ": same shapes as Qwen2.5-1.5B", "from memory (same shapes as Qwen2.5-1.5B)", aliases=["Qwen/Qwen2-1.5B-Instruct"])
add("Qwen/Qwen2-7B", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 131072, "bfloat16", 7615616512, R13 + ": same shapes as Qwen2.5-7B", "from memory (same shapes as Qwen2.5-7B)", aliases=["Qwen/Qwen2-7B-Instruct"])
add("Qwen/Qwen2-72B", "qwen2", 80, 8192, 29568, 64, 8, 128, 152064, False, 131072, "bfloat16", 72_700_000_000, HUB + " (72.7B)", aliases=["Qwen/Qwen2-72B-Instruct"])
add("Qwen/Qwen2-57B-A14B", "qwen2_moe", 28, 3584, 18944, 28, 4, 128, 151936, False, 131072, "bfloat16",
    57_400_000_000, HUB + " (57.4B)", aliases=["Qwen/Qwen2-57B-A14B-Instruct"], num_experts=64, experts_per_token=8,
    expert_intermediate_size=2560, shared_expert_intermediate_size=20480)
# ---- Qwen 2.5
add("Qwen/Qwen2.5-0.5B", "qwen2", 24, 896, 4864, 14, 2, 64, 151936, True, 32768, "bfloat16", 494032768, R13,
    R13 + ": hidden, layers, vocab, context; intermediate, heads, KV heads and tying from memory but reproduce the exact total",
    aliases=["Qwen/Qwen2.5-0.5B-Instruct", "Qwen/Qwen2.5-Coder-0.5B", "Qwen/Qwen2.5-Coder-0.5B-Instruct"])
add("Qwen/Qwen2.5-1.5B", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, True, 131072, "bfloat16", 1543714304, R13, R13 + ": 1536/8960/28/12/2/151936, tied; base max_position_embeddings 131072 from memory")
add("Qwen/Qwen2.5-1.5B-Instruct", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, True, 32768, "bfloat16", 1543714304, R13, R13 + ": shapes as Qwen2.5-1.5B, max_position_embeddings 32768 in Instruct config copies")
add("Qwen/Qwen2.5-3B", "qwen2", 36, 2048, 11008, 16, 2, 128, 151936, True, 32768, "bfloat16", 3_090_000_000, QC + " (3.09B)", aliases=["Qwen/Qwen2.5-3B-Instruct", "Qwen/Qwen2.5-Coder-3B", "Qwen/Qwen2.5-Coder-3B-Instruct"])
add("Qwen/Qwen2.5-7B", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 131072, "bfloat16", 7615616512, R13, R13 + ": 3584/18944/28/28/4/152064, untied; base-model log shows max_position_embeddings 131072")
add("Qwen/Qwen2.5-7B-Instruct", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 32768, "bfloat16", 7615616512, R13, R13 + ": Instruct config (transformers 4.43.3) with max_position_embeddings 32768")
add("Qwen/Qwen2.5-14B", "qwen2", 48, 5120, 13824, 40, 8, 128, 152064, False, 131072, "bfloat16", 14_700_000_000, QC + " (14.7B)", aliases=["Qwen/Qwen2.5-14B-Instruct"])
add("Qwen/Qwen2.5-32B", "qwen2", 64, 5120, 27648, 40, 8, 128, 152064, False, 131072, "bfloat16", 32_800_000_000, HUB + " (32.8B; the model card states 32.5B)", aliases=["Qwen/Qwen2.5-32B-Instruct"])
add("Qwen/Qwen2.5-72B", "qwen2", 80, 8192, 29568, 64, 8, 128, 152064, False, 131072, "bfloat16", 72_700_000_000, QC + " (72.7B)", aliases=["Qwen/Qwen2.5-72B-Instruct"])
add("Qwen/Qwen2.5-Coder-1.5B", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, True, 32768, "bfloat16", 1_540_000_000, QC + " (1.54B)", aliases=["Qwen/Qwen2.5-Coder-1.5B-Instruct"])
add("Qwen/Qwen2.5-Coder-7B", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 32768, "bfloat16", 7_610_000_000, QC + " (7.61B)", aliases=["Qwen/Qwen2.5-Coder-7B-Instruct"])
add("Qwen/Qwen2.5-Coder-14B", "qwen2", 48, 5120, 13824, 40, 8, 128, 152064, False, 32768, "bfloat16", 14_700_000_000, QC + " (14.7B)", aliases=["Qwen/Qwen2.5-Coder-14B-Instruct"])
add("Qwen/Qwen2.5-Coder-32B", "qwen2", 64, 5120, 27648, 40, 8, 128, 152064, False, 32768, "bfloat16", 32_800_000_000, HUB + " (32.8B; the model card states 32.5B)", aliases=["Qwen/Qwen2.5-Coder-32B-Instruct"])
add("Qwen/Qwen2.5-Math-1.5B", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, True, 4096, "bfloat16", 1_540_000_000, QC + " (1.54B)", "from memory (Qwen2.5-1.5B shapes, context 4096)", aliases=["Qwen/Qwen2.5-Math-1.5B-Instruct"])
add("Qwen/Qwen2.5-Math-7B", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 4096, "bfloat16", 7_610_000_000, QC + " (7.61B)", "from memory (Qwen2.5-7B shapes, context 4096)", aliases=["Qwen/Qwen2.5-Math-7B-Instruct"])
# ---- Qwen 3
add("Qwen/Qwen3-0.6B", "qwen3", 28, 1024, 3072, 16, 8, 128, 151936, True, 40960, "bfloat16", 596_000_000, HUB + " (596M; card 0.6B, 0.44B non-embedding)", aliases=["Qwen/Qwen3-0.6B-Base"])
add("Qwen/Qwen3-1.7B", "qwen3", 28, 2048, 6144, 16, 8, 128, 151936, True, 40960, "bfloat16", 1_720_000_000, QC + " (1.7B, 1.4B non-embedding)", aliases=["Qwen/Qwen3-1.7B-Base"])
add("Qwen/Qwen3-4B", "qwen3", 36, 2560, 9728, 32, 8, 128, 151936, True, 40960, "bfloat16", 4_020_000_000, HUB + " (4.02B; card 4.0B)", aliases=["Qwen/Qwen3-4B-Base"])
add("Qwen/Qwen3-4B-Instruct-2507", "qwen3", 36, 2560, 9728, 32, 8, 128, 151936, True, 262144, "bfloat16", 4_020_000_000, HUB + " (4.02B)", "from memory (Qwen3-4B shapes, context 262144)", aliases=["Qwen/Qwen3-4B-Thinking-2507"])
add("Qwen/Qwen3-8B", "qwen3", 36, 4096, 12288, 32, 8, 128, 151936, False, 40960, "bfloat16", 8_190_000_000, HUB + " (8.19B)", aliases=["Qwen/Qwen3-8B-Base"])
add("Qwen/Qwen3-14B", "qwen3", 40, 5120, 17408, 40, 8, 128, 151936, False, 40960, "bfloat16", 14_800_000_000, HUB + " (14.8B)", aliases=["Qwen/Qwen3-14B-Base"])
add("Qwen/Qwen3-32B", "qwen3", 64, 5120, 25600, 64, 8, 128, 151936, False, 40960, "bfloat16", 32_800_000_000, HUB + " (32.8B)")
add("Qwen/Qwen3-30B-A3B", "qwen3_moe", 48, 2048, 6144, 32, 4, 128, 151936, False, 40960, "bfloat16", 30_500_000_000, QC + " (30.5B total, 3.3B activated)",
    aliases=["Qwen/Qwen3-30B-A3B-Base"], num_experts=128, experts_per_token=8, expert_intermediate_size=768)
add("Qwen/Qwen3-30B-A3B-Instruct-2507", "qwen3_moe", 48, 2048, 6144, 32, 4, 128, 151936, False, 262144, "bfloat16", 30_500_000_000, QC + " (30.5B)",
    "from memory (Qwen3-30B-A3B shapes, context 262144)", aliases=["Qwen/Qwen3-30B-A3B-Thinking-2507"], num_experts=128, experts_per_token=8, expert_intermediate_size=768)
add("Qwen/Qwen3-235B-A22B", "qwen3_moe", 94, 4096, 12288, 64, 4, 128, 151936, False, 40960, "bfloat16", 235_000_000_000, QC + " (235B total, 22B activated)",
    num_experts=128, experts_per_token=8, expert_intermediate_size=1536)
# ---- Gemma
add("google/gemma-2b", "gemma", 18, 2048, 16384, 8, 1, 256, 256000, True, 8192, "bfloat16", 2_506_172_416, "from memory (num_parameters())", aliases=["google/gemma-2b-it", "google/gemma-1.1-2b-it", "google/codegemma-2b"])
add("google/gemma-7b", "gemma", 28, 3072, 24576, 16, 16, 256, 256000, True, 8192, "bfloat16", 8_537_680_896, "from memory (num_parameters())", aliases=["google/gemma-7b-it", "google/gemma-1.1-7b-it", "google/codegemma-7b", "google/codegemma-7b-it"])
add("google/gemma-2-2b", "gemma2", 26, 2304, 9216, 8, 4, 256, 256000, True, 8192, "float32", 2_610_000_000, HUB + " (2.61B)", aliases=["google/gemma-2-2b-it"], sliding_window=4096)
add("google/gemma-2-9b", "gemma2", 42, 3584, 14336, 16, 8, 256, 256000, True, 8192, "float32", 9_240_000_000, HUB + " (9.24B)", aliases=["google/gemma-2-9b-it"], sliding_window=4096)
add("google/gemma-2-27b", "gemma2", 46, 4608, 36864, 32, 16, 128, 256000, True, 8192, "float32", 27_200_000_000, HUB + " (27.2B)", aliases=["google/gemma-2-27b-it"], sliding_window=4096)
add("google/gemma-3-270m", "gemma3_text", 18, 640, 2048, 4, 1, 256, 262144, True, 32768, "bfloat16", 268_000_000, "Gemma 3 270M model card (270M, 170M of them embeddings), from memory", aliases=["google/gemma-3-270m-it"], sliding_window=512)
add("google/gemma-3-1b-pt", "gemma3_text", 26, 1152, 6912, 4, 1, 256, 262144, True, 32768, "bfloat16", 1_000_000_000, HUB + " (1.00B)", aliases=["google/gemma-3-1b-it"], sliding_window=512)
GM = "from memory; text tower only (the released checkpoint adds a ~0.4B SigLIP vision tower, so the published total is not comparable)"
add("google/gemma-3-4b-pt", "gemma3_text", 34, 2560, 10240, 8, 4, 256, 262208, True, 131072, "bfloat16", None, "Gemma 3 technical report: 4B including the vision encoder; not comparable with the text tower", GM, aliases=["google/gemma-3-4b-it"], sliding_window=1024)
add("google/gemma-3-12b-pt", "gemma3_text", 48, 3840, 15360, 16, 8, 256, 262208, True, 131072, "bfloat16", None, "Gemma 3 technical report: 12B including the vision encoder; not comparable with the text tower", GM, aliases=["google/gemma-3-12b-it"], sliding_window=1024)
add("google/gemma-3-27b-pt", "gemma3_text", 62, 5376, 21504, 32, 16, 128, 262208, True, 131072, "bfloat16", None, "Gemma 3 technical report: 27B including the vision encoder; not comparable with the text tower", GM, aliases=["google/gemma-3-27b-it"], sliding_window=1024)
# ---- Phi
add("microsoft/phi-1_5", "phi", 24, 2048, 8192, 32, 32, 64, 51200, False, 2048, "float16", 1_420_000_000, HUB + " (1.42B)")
add("microsoft/phi-2", "phi", 32, 2560, 10240, 32, 32, 80, 51200, False, 2048, "float16", 2_780_000_000, HUB + " (2.78B)")
add("microsoft/Phi-3-mini-4k-instruct", "phi3", 32, 3072, 8192, 32, 32, 96, 32064, False, 4096, "bfloat16", 3_821_079_552, "from memory (num_parameters(); card 3.8B)")
add("microsoft/Phi-3-mini-128k-instruct", "phi3", 32, 3072, 8192, 32, 32, 96, 32064, False, 131072, "bfloat16", 3_820_000_000, HUB + " (3.82B)")
add("microsoft/Phi-3.5-mini-instruct", "phi3", 32, 3072, 8192, 32, 32, 96, 32064, False, 131072, "bfloat16", 3_820_000_000, HUB + " (3.82B)")
add("microsoft/Phi-3-medium-4k-instruct", "phi3", 40, 5120, 17920, 40, 10, 128, 32064, False, 4096, "bfloat16", 14_000_000_000, HUB + " (14.0B)")
add("microsoft/Phi-3-medium-128k-instruct", "phi3", 40, 5120, 17920, 40, 10, 128, 32064, False, 131072, "bfloat16", 14_000_000_000, HUB + " (14.0B)")
add("microsoft/phi-4", "phi3", 40, 5120, 17920, 40, 10, 128, 100352, False, 16384, "bfloat16", 14_700_000_000, HUB + " (14.7B)")
add("microsoft/Phi-4-mini-instruct", "phi3", 32, 3072, 8192, 24, 8, 128, 200064, True, 131072, "bfloat16", 3_840_000_000, HUB + " (3.84B)")
# ---- Falcon
add("tiiuae/falcon-7b", "falcon", 32, 4544, 18176, 71, 1, 64, 65024, True, 2048, "bfloat16", 6_920_000_000, HUB + " (6.92B)", aliases=["tiiuae/falcon-7b-instruct"], parallel_norms=1)
add("tiiuae/falcon-40b", "falcon", 60, 8192, 32768, 128, 8, 64, 65024, True, 2048, "bfloat16", None, "TII announces 40B (rounded; no exact published count known here)", aliases=["tiiuae/falcon-40b-instruct"], parallel_norms=2)
add("tiiuae/falcon-180B", "falcon", 80, 14848, 59392, 232, 8, 64, 65024, True, 2048, "bfloat16", None, "TII announces 180B (rounded; no exact published count known here)", aliases=["tiiuae/falcon-180B-chat"], parallel_norms=2)
add("tiiuae/Falcon3-1B-Base", "llama", 18, 2048, 8192, 8, 4, 256, 131072, False, 4096, "bfloat16", 1_670_000_000, HUB + " (1.67B)", aliases=["tiiuae/Falcon3-1B-Instruct"])
add("tiiuae/Falcon3-3B-Base", "llama", 22, 3072, 9216, 12, 4, 256, 131072, False, 8192, "bfloat16", 3_230_000_000, HUB + " (3.23B)", aliases=["tiiuae/Falcon3-3B-Instruct"])
add("tiiuae/Falcon3-7B-Base", "llama", 28, 3072, 23040, 12, 4, 256, 131072, False, 32768, "bfloat16", 7_460_000_000, HUB + " (7.46B)", aliases=["tiiuae/Falcon3-7B-Instruct"])
add("tiiuae/Falcon3-10B-Base", "llama", 40, 3072, 23040, 12, 4, 256, 131072, False, 32768, "bfloat16", 10_300_000_000, HUB + " (10.3B)", aliases=["tiiuae/Falcon3-10B-Instruct"])
# ---- StarCoder2
add("bigcode/starcoder2-3b", "starcoder2", 30, 3072, 12288, 24, 2, 128, 49152, True, 16384, "float32", 3_030_000_000, HUB + " (3.03B)", sliding_window=4096)
add("bigcode/starcoder2-7b", "starcoder2", 32, 4608, 18432, 36, 4, 128, 49152, True, 16384, "float32", 7_170_000_000, HUB + " (7.17B)", sliding_window=4096)
add("bigcode/starcoder2-15b", "starcoder2", 40, 6144, 24576, 48, 4, 128, 49152, False, 16384, "float32", 16_000_000_000, HUB + " (16.0B)", aliases=["bigcode/starcoder2-15b-instruct-v0.1"], sliding_window=4096)
# ---- DeepSeek
add("deepseek-ai/DeepSeek-R1-Distill-Qwen-1.5B", "qwen2", 28, 1536, 8960, 12, 2, 128, 151936, False, 131072, "bfloat16", 1_780_000_000, HUB + " (1.78B)", "from memory (Qwen2.5-Math-1.5B shapes, untied)")
add("deepseek-ai/DeepSeek-R1-Distill-Qwen-7B", "qwen2", 28, 3584, 18944, 28, 4, 128, 152064, False, 131072, "bfloat16", 7_620_000_000, HUB + " (7.62B)", "from memory (Qwen2.5-Math-7B shapes)")
add("deepseek-ai/DeepSeek-R1-Distill-Qwen-14B", "qwen2", 48, 5120, 13824, 40, 8, 128, 152064, False, 131072, "bfloat16", 14_800_000_000, HUB + " (14.8B)", "from memory (Qwen2.5-14B shapes)")
add("deepseek-ai/DeepSeek-R1-Distill-Qwen-32B", "qwen2", 64, 5120, 27648, 40, 8, 128, 152064, False, 131072, "bfloat16", 32_800_000_000, HUB + " (32.8B)", "from memory (Qwen2.5-32B shapes)")
add("deepseek-ai/DeepSeek-R1-Distill-Llama-8B", "llama", 32, 4096, 14336, 32, 8, 128, 128256, False, 131072, "bfloat16", 8_030_000_000, HUB + " (8.03B)", "from memory (Llama-3.1-8B shapes)")
add("deepseek-ai/DeepSeek-R1-Distill-Llama-70B", "llama", 80, 8192, 28672, 64, 8, 128, 128256, False, 131072, "bfloat16", 70_600_000_000, HUB + " (70.6B)", "from memory (Llama-3.3-70B shapes)")
add("deepseek-ai/DeepSeek-V2-Lite", "deepseek_v2", 27, 2048, 10944, 16, 16, 192, 102400, False, 163840, "bfloat16", 15_700_000_000, "DeepSeek-V2 paper / model card (15.7B total, 2.4B activated), from memory",
    aliases=["deepseek-ai/DeepSeek-V2-Lite-Chat"], num_experts=64, experts_per_token=6, expert_intermediate_size=1408,
    shared_expert_intermediate_size=2816, first_dense_layers=1, kv_lora_rank=512, qk_rope_head_dim=64, v_head_dim=128)
add("deepseek-ai/deepseek-coder-6.7b-base", "llama", 32, 4096, 11008, 32, 32, 128, 32256, False, 16384, "bfloat16", 6_740_000_000, HUB + " (6.74B)", aliases=["deepseek-ai/deepseek-coder-6.7b-instruct"])
add("deepseek-ai/deepseek-llm-7b-base", "llama", 30, 4096, 11008, 32, 32, 128, 102400, False, 4096, "bfloat16", 6_910_000_000, HUB + " (6.91B)", aliases=["deepseek-ai/deepseek-llm-7b-chat"])
# ---- OLMo
add("allenai/OLMo-1B-hf", "olmo", 16, 2048, 8192, 16, 16, 128, 50304, True, 2048, "float32", 1_180_000_000, HUB + " (1.18B)", aliases=["allenai/OLMo-1B-0724-hf"])
add("allenai/OLMo-7B-hf", "olmo", 32, 4096, 11008, 32, 32, 128, 50304, False, 2048, "float32", 6_890_000_000, HUB + " (6.89B)", aliases=["allenai/OLMo-7B-0424-hf", "allenai/OLMo-7B-0724-hf", "allenai/OLMo-7B-Instruct-hf"])
add("allenai/OLMo-2-0425-1B", "olmo2", 16, 2048, 8192, 16, 16, 128, 100352, False, 4096, "float32", 1_480_000_000, HUB + " (1.48B)", aliases=["allenai/OLMo-2-0425-1B-Instruct"])
add("allenai/OLMo-2-1124-7B", "olmo2", 32, 4096, 11008, 32, 32, 128, 100352, False, 4096, "float32", 7_300_000_000, HUB + " (7.30B)", aliases=["allenai/OLMo-2-1124-7B-Instruct", "allenai/OLMo-2-1124-7B-SFT"])
add("allenai/OLMo-2-1124-13B", "olmo2", 40, 5120, 13824, 40, 40, 128, 100352, False, 4096, "float32", 13_700_000_000, HUB + " (13.7B)", aliases=["allenai/OLMo-2-1124-13B-Instruct"])
# ---- SmolLM
SM = "Hub model page parameter count, from memory"
add("HuggingFaceTB/SmolLM-135M", "llama", 30, 576, 1536, 9, 3, 64, 49152, True, 2048, "bfloat16", 134_515_008, "from memory (num_parameters(); card 135M)", aliases=["HuggingFaceTB/SmolLM-135M-Instruct"])
add("HuggingFaceTB/SmolLM-360M", "llama", 32, 960, 2560, 15, 5, 64, 49152, True, 2048, "bfloat16", 361_821_120, "from memory (num_parameters(); card 360M)", aliases=["HuggingFaceTB/SmolLM-360M-Instruct"])
add("HuggingFaceTB/SmolLM-1.7B", "llama", 24, 2048, 8192, 32, 32, 64, 49152, True, 2048, "bfloat16", 1_711_376_384, "from memory (num_parameters())", aliases=["HuggingFaceTB/SmolLM-1.7B-Instruct"])
add("HuggingFaceTB/SmolLM2-135M", "llama", 30, 576, 1536, 9, 3, 64, 49152, True, 8192, "bfloat16", 134_515_008, "from memory (num_parameters())", aliases=["HuggingFaceTB/SmolLM2-135M-Instruct"])
add("HuggingFaceTB/SmolLM2-360M", "llama", 32, 960, 2560, 15, 5, 64, 49152, True, 8192, "bfloat16", 361_821_120, "from memory (num_parameters())", aliases=["HuggingFaceTB/SmolLM2-360M-Instruct"])
add("HuggingFaceTB/SmolLM2-1.7B", "llama", 24, 2048, 8192, 32, 32, 64, 49152, True, 8192, "bfloat16", 1_711_376_384, "from memory (num_parameters())", aliases=["HuggingFaceTB/SmolLM2-1.7B-Instruct"])
add("HuggingFaceTB/SmolLM3-3B", "smollm3", 36, 2048, 11008, 16, 4, 128, 128256, True, 65536, "bfloat16", 3_080_000_000, HUB + " (3.08B)", aliases=["HuggingFaceTB/SmolLM3-3B-Base"])
# ---- gpt-oss
GO = "gpt-oss model card: MXFP4 expert weights, the rest bfloat16"
add("openai/gpt-oss-20b", "gpt_oss", 24, 2880, 2880, 64, 8, 64, 201088, False, 131072, "bfloat16", 20_900_000_000, "gpt-oss model card (21B total, 3.6B active; 20.9B), from memory",
    GO + "; shapes from memory", num_experts=32, experts_per_token=4, sliding_window=128, attention_bias=True)
add("openai/gpt-oss-120b", "gpt_oss", 36, 2880, 2880, 64, 8, 64, 201088, False, 131072, "bfloat16", 116_800_000_000, "gpt-oss model card (117B total, 5.1B active; 116.8B), from memory",
    GO + "; shapes from memory", num_experts=128, experts_per_token=4, sliding_window=128, attention_bias=True)
# ---- Granite
add("ibm-granite/granite-3.0-2b-base", "granite", 40, 2048, 8192, 32, 8, 64, 49155, True, 4096, "bfloat16", 2_530_000_000, HUB + " (2.53B)", aliases=["ibm-granite/granite-3.0-2b-instruct"])
add("ibm-granite/granite-3.0-8b-base", "granite", 40, 4096, 12800, 32, 8, 128, 49155, True, 4096, "bfloat16", 8_170_000_000, HUB + " (8.17B)", aliases=["ibm-granite/granite-3.0-8b-instruct"])
add("ibm-granite/granite-3.1-2b-base", "granite", 40, 2048, 8192, 32, 8, 64, 49155, True, 131072, "bfloat16", 2_530_000_000, HUB + " (2.53B)", aliases=["ibm-granite/granite-3.1-2b-instruct"])
add("ibm-granite/granite-3.1-8b-base", "granite", 40, 4096, 12800, 32, 8, 128, 49155, True, 131072, "bfloat16", 8_170_000_000, HUB + " (8.17B)", aliases=["ibm-granite/granite-3.1-8b-instruct"])
add("ibm-granite/granite-3.3-2b-base", "granite", 40, 2048, 8192, 32, 8, 64, 49159, True, 131072, "bfloat16", 2_530_000_000, HUB + " (2.53B)", aliases=["ibm-granite/granite-3.3-2b-instruct"])
add("ibm-granite/granite-3.3-8b-base", "granite", 40, 4096, 12800, 32, 8, 128, 49159, True, 131072, "bfloat16", 8_170_000_000, HUB + " (8.17B)", aliases=["ibm-granite/granite-3.3-8b-instruct"])
# ---- TinyLlama
add("TinyLlama/TinyLlama-1.1B-Chat-v1.0", "llama", 22, 2048, 5632, 32, 4, 64, 32000, False, 2048, "bfloat16", 1100048384, R13, R13 + ": copy of TinyLlama-1.1B-Chat-v1.0/config.json",
    aliases=["TinyLlama/TinyLlama-1.1B-intermediate-step-1431k-3T", "TinyLlama/TinyLlama_v1.1"])
# ---- Pythia (Biderman et al. 2023, Table 1 lists the total parameter counts)
PY = "Biderman et al. 2023 (Pythia) Table 1 total parameters, from memory"
for name, L, h, H, V, pub in [("70m", 6, 512, 8, 50304, 70426624), ("160m", 12, 768, 12, 50304, 162322944),
                              ("410m", 24, 1024, 16, 50304, 405334016), ("1b", 16, 2048, 8, 50304, 1011781632),
                              ("1.4b", 24, 2048, 16, 50304, 1414647808), ("2.8b", 32, 2560, 32, 50304, 2775208960),
                              ("6.9b", 32, 4096, 32, 50432, 6857302016), ("12b", 36, 5120, 40, 50688, 11846072320)]:
    add(f"EleutherAI/pythia-{name}", "gpt_neox", L, h, 4 * h, H, H, h // H, V, False, 2048, "float16", pub, PY,
        "Biderman et al. 2023 Table 1 (layers, model dim, heads), from memory; vocab padding from memory", aliases=[f"EleutherAI/pythia-{name}-deduped"])
# ---- more dense shapes people fine-tune (Code Llama 70B, Mistral Large, Yi, DeepSeek Coder / LLM, SOLAR, ...)
add("codellama/CodeLlama-70b-hf", "llama", 80, 8192, 28672, 64, 8, 128, 32016, False, 16384, "bfloat16",
    69_000_000_000, HUB + " (69B)", aliases=["codellama/CodeLlama-70b-Instruct-hf", "codellama/CodeLlama-70b-Python-hf"])
add("mistralai/Mistral-Large-Instruct-2407", "mistral", 88, 12288, 28672, 96, 8, 128, 32768, False, 131072, "bfloat16")
add("Qwen/Qwen1.5-110B", "qwen2", 80, 8192, 49152, 64, 8, 128, 152064, False, 32768, "bfloat16", 111_000_000_000,
    HUB + " (111B)", aliases=["Qwen/Qwen1.5-110B-Chat"])
add("Qwen/CodeQwen1.5-7B", "qwen2", 32, 4096, 13440, 32, 4, 128, 92416, False, 65536, "bfloat16", aliases=["Qwen/CodeQwen1.5-7B-Chat"])
add("01-ai/Yi-6B", "llama", 32, 4096, 11008, 32, 4, 128, 64000, False, 4096, "bfloat16", aliases=["01-ai/Yi-6B-Chat", "01-ai/Yi-1.5-6B", "01-ai/Yi-1.5-6B-Chat"])
add("01-ai/Yi-1.5-9B", "llama", 48, 4096, 11008, 32, 4, 128, 64000, False, 4096, "bfloat16", aliases=["01-ai/Yi-1.5-9B-Chat", "01-ai/Yi-9B"])
add("01-ai/Yi-34B", "llama", 60, 7168, 20480, 56, 8, 128, 64000, False, 4096, "bfloat16", aliases=["01-ai/Yi-34B-Chat", "01-ai/Yi-1.5-34B", "01-ai/Yi-1.5-34B-Chat"])
add("deepseek-ai/deepseek-coder-1.3b-base", "llama", 24, 2048, 5504, 16, 16, 128, 32256, False, 16384, "bfloat16", aliases=["deepseek-ai/deepseek-coder-1.3b-instruct"])
add("deepseek-ai/deepseek-coder-33b-base", "llama", 62, 7168, 19200, 56, 8, 128, 32256, False, 16384, "bfloat16", 33_300_000_000, HUB + " (33.3B)", aliases=["deepseek-ai/deepseek-coder-33b-instruct"])
add("deepseek-ai/deepseek-llm-67b-base", "llama", 95, 8192, 22016, 64, 8, 128, 102400, False, 4096, "bfloat16", 67_400_000_000, HUB + " (67.4B)", aliases=["deepseek-ai/deepseek-llm-67b-chat"])
add("allenai/OLMo-2-0325-32B", "olmo2", 64, 5120, 27648, 40, 8, 128, 100352, False, 4096, "bfloat16", aliases=["allenai/OLMo-2-0325-32B-Instruct"])
add("EleutherAI/gpt-neox-20b", "gpt_neox", 44, 6144, 24576, 64, 64, 96, 50432, False, 2048, "float16", src="Black et al. 2022 (GPT-NeoX-20B) Table 1 (44 layers, d_model 6144, 64 heads), from memory")
add("distilbert/distilgpt2", "gpt2", 6, 768, 3072, 12, 12, 64, 50257, True, 1024, "float32", aliases=["distilgpt2"])
add("upstage/SOLAR-10.7B-v1.0", "llama", 48, 4096, 14336, 32, 8, 128, 32000, False, 4096, "float16", aliases=["upstage/SOLAR-10.7B-Instruct-v1.0"])
add("nvidia/Mistral-NeMo-Minitron-8B-Base", "mistral", 40, 4096, 11520, 32, 8, 128, 131072, False, 8192, "bfloat16",
    8_410_000_000, HUB + " (8.41B)", aliases=["nvidia/Mistral-NeMo-Minitron-8B-Instruct"])
add("openlm-research/open_llama_3b", "llama", 26, 3200, 8640, 32, 32, 100, 32000, False, 2048, "float16", aliases=["openlm-research/open_llama_3b_v2"])
for name, h, inter, heads in [("14m", 128, 512, 4), ("31m", 256, 1024, 8)]:
    add(f"EleutherAI/pythia-{name}", "gpt_neox", 6, h, inter, heads, heads, h // heads, 50304, False, 2048, "float16")

# ---- GPT-2 (Radford et al. 2019 Table 2 gives layers and widths; totals are num_parameters())
for name, L, h, H, pub in [("gpt2", 12, 768, 12, 124439808), ("gpt2-medium", 24, 1024, 16, 354823168),
                           ("gpt2-large", 36, 1280, 20, 774030080), ("gpt2-xl", 48, 1600, 25, 1557611200)]:
    add(f"openai-community/{name}", "gpt2", L, h, 4 * h, H, H, h // H, 50257, True, 1024, "float32", pub,
        "from memory (num_parameters() of the transformers checkpoint)", "Radford et al. 2019 Table 2 (layers, d_model); heads from memory",
        aliases=[name])
derived = [
    {"tokens": ["zephyr", "7b"], "base": "mistralai/Mistral-7B-v0.1", "source": "Zephyr-7B is a fine-tune of Mistral-7B-v0.1 (Tunstall et al. 2023), from memory"},
    {"tokens": ["zephyr", "7b", "gemma"], "base": "google/gemma-7b", "source": "Zephyr-7B-Gemma is a fine-tune of gemma-7b, from memory"},
    {"tokens": ["starchat2", "15b"], "base": "bigcode/starcoder2-15b", "source": "StarChat2-15B is a fine-tune of starcoder2-15b, from memory"},
    {"tokens": ["openhermes", "mistral", "7b"], "base": "mistralai/Mistral-7B-v0.1", "source": "OpenHermes-2.5-Mistral-7B is a fine-tune of Mistral-7B-v0.1, from memory"},
    {"tokens": ["vicuna", "7b"], "base": "meta-llama/Llama-2-7b-hf", "source": "Vicuna-7B v1.5 is a fine-tune of Llama-2-7b, from memory"},
    {"tokens": ["vicuna", "13b"], "base": "meta-llama/Llama-2-13b-hf", "source": "Vicuna-13B v1.5 is a fine-tune of Llama-2-13b, from memory"},
]
# Exact counts published in keras-hub's preset tables (keras_hub/src/models/<family>/<family>_presets.py,
# "params" of the same weights), read through code search; they are whole-model counts like num_parameters().
KH = "keras-team/keras-hub keras_hub/src/models/{0}_presets.py, preset params {1:,} (read via code search)"
KERAS = {
    "meta-llama/Llama-2-7b-hf": ("llama/llama", 6738415616),
    "meta-llama/Meta-Llama-3-8B": ("llama3/llama3", 8030261248),
    "meta-llama/Llama-3.1-8B": ("llama3/llama3", 8030261248),
    "mistralai/Mistral-7B-v0.1": ("mistral/mistral", 7241732096),
    "mistralai/Mistral-7B-Instruct-v0.2": ("mistral/mistral", 7241732096),
    "mistralai/Mixtral-8x7B-v0.1": ("mixtral/mixtral", 46702792704),
    "Qwen/Qwen1.5-MoE-A2.7B": ("qwen_moe/qwen_moe", 14315784192),
    "Qwen/Qwen2.5-0.5B": ("qwen/qwen", 494032768),
    "Qwen/Qwen2.5-3B": ("qwen/qwen", 3085938688),
    "Qwen/Qwen2.5-32B": ("qwen/qwen", 32763876352),
    "Qwen/Qwen2.5-72B": ("qwen/qwen", 72706203648),
    "Qwen/Qwen2.5-Coder-32B": ("qwen/qwen", 32763876352),
    "Qwen/Qwen2.5-Math-1.5B": ("qwen/qwen", 1543714304),
    "Qwen/Qwen2.5-Math-7B": ("qwen/qwen", 7615616512),
    "Qwen/Qwen3-0.6B": ("qwen3/qwen3", 596049920),
    "Qwen/Qwen3-1.7B": ("qwen3/qwen3", 1720574976),
    "Qwen/Qwen3-4B": ("qwen3/qwen3", 4022468096),
    "Qwen/Qwen3-8B": ("qwen3/qwen3", 8190735360),
    "Qwen/Qwen3-14B": ("qwen3/qwen3", 14768307200),
    "Qwen/Qwen3-32B": ("qwen3/qwen3", 32762123264),
    "Qwen/Qwen3-30B-A3B": ("qwen3_moe/qwen3_moe", 30532122624),
    "Qwen/Qwen3-235B-A22B": ("qwen3_moe/qwen3_moe", 235093634560),
    "google/gemma-2b": ("gemma/gemma", 2506172416),
    "google/gemma-7b": ("gemma/gemma", 8537680896),
    "google/gemma-2-2b": ("gemma/gemma", 2614341888),
    "google/gemma-2-9b": ("gemma/gemma", 9241705984),
    "google/gemma-2-27b": ("gemma/gemma", 27227128320),
    "google/gemma-3-270m": ("gemma3/gemma3", 268098176),
    "google/gemma-3-1b-pt": ("gemma3/gemma3", 999885952),
    "microsoft/Phi-3-mini-4k-instruct": ("phi3/phi3", 3821079552),
    "microsoft/Phi-3-mini-128k-instruct": ("phi3/phi3", 3821079552),
    "HuggingFaceTB/SmolLM3-3B": ("smollm3/smollm3", 3075100928),
    "openai-community/gpt2": ("gpt2/gpt2", 124439808),
    "openai-community/gpt2-medium": ("gpt2/gpt2", 354823168),
    "openai-community/gpt2-large": ("gpt2/gpt2", 774030080),
    "openai-community/gpt2-xl": ("gpt2/gpt2", 1557611200),
}
# keras-hub text-only Gemma 3 presets use a 262,144-row vocabulary; the transformers checkpoints pad it to 262,208
# rows (from memory), 64 rows more than the preset counts.
KERAS_TEXT = {"google/gemma-3-4b-pt": 3880099328, "google/gemma-3-12b-pt": 11765788416, "google/gemma-3-27b-pt": 27009002240}
# keras-hub's Llama 3.2 presets count an untied output layer: less one 128256 x hidden embedding they are the tied totals.
KERAS_UNTIED = {"meta-llama/Llama-3.2-1B": (1498482688, 2048), "meta-llama/Llama-3.2-3B": (3606752256, 3072)}
for r in rows:
    if r["id"] in KERAS:
        f, n = KERAS[r["id"]]
        r["published_total"], r["published_source"] = n, KH.format(f, n)
        if r["source"] == M:
            r["source"] = "from memory; the published exact total confirms the shapes"
    elif r["id"] in KERAS_TEXT:
        n = KERAS_TEXT[r["id"]]
        r["published_total"] = n
        r["published_source"] = KH.format("gemma3/gemma3", n) + " for the text-only model with a 262,144-row vocabulary"
        r["source"] = "from memory; text tower only (the vision checkpoint adds a SigLIP encoder); vocabulary 262,208 as in the transformers config, from memory"
    elif r["id"] in KERAS_UNTIED:
        n, h = KERAS_UNTIED[r["id"]]
        r["published_total"] = n - 128256 * h
        r["published_source"] = (KH.format("llama3/llama3", n) + f", which counts the tied output layer again; "
                                 f"less 128256 x {h} = {n - 128256 * h:,}")
        r["source"] = "from memory; the published exact total confirms the shapes"
# Exact totals that appear in third-party copies of published metadata, found by code search: Hugging Face API
# `safetensors.total` values (a table fetched 2026-10-01), GGUF `general.parameter_count` values and Hub listings.
HFAPI = "Hugging Face API safetensors.total {0:,} (a third-party table of API values fetched 2026-10-01, via code search)"
GGUF = "GGUF general.parameter_count / Hub total {0:,} (third-party copies of the metadata, via code search)"
EXACT = {
    "meta-llama/Llama-3.1-70B": (70553706496, HFAPI), "meta-llama/Llama-3.1-405B": (405853388800, HFAPI),
    "meta-llama/Llama-3.3-70B-Instruct": (70553706496, GGUF),
    "deepseek-ai/DeepSeek-R1-Distill-Llama-70B": (70553706496, GGUF),
    "HuggingFaceTB/SmolLM3-3B": (3075098624, HFAPI + " for SmolLM3-3B-Base"),
    "allenai/OLMo-2-1124-7B": (7298617344, HFAPI), "allenai/OLMo-2-1124-13B": (13716198400, HFAPI),
    "mistralai/Mixtral-8x22B-v0.1": (140620634112, GGUF), "mistralai/Mistral-7B-v0.3": (7248023552, GGUF),
    "mistralai/Mistral-Nemo-Base-2407": (12247782400, GGUF), "mistralai/Mistral-Small-24B-Base-2501": (23572403200, GGUF),
    "microsoft/phi-4": (14659507200, GGUF), "microsoft/Phi-4-mini-instruct": (3836021760, GGUF),
    "microsoft/phi-2": (2779683840, GGUF), "microsoft/Phi-3-medium-4k-instruct": (13960238080, GGUF),
    "deepseek-ai/DeepSeek-V2-Lite": (15706484224, GGUF), "deepseek-ai/DeepSeek-R1-Distill-Qwen-1.5B": (1777088000, GGUF),
    "deepseek-ai/DeepSeek-R1-Distill-Qwen-14B": (14770033664, GGUF), "Qwen/Qwen2.5-14B": (14770033664, GGUF),
    "openai/gpt-oss-20b": (20914757184, GGUF), "openai/gpt-oss-120b": (116829156672, GGUF),
    "Qwen/Qwen1.5-7B": (7721324544, GGUF), "Qwen/Qwen2-57B-A14B": (57408658944, HFAPI.replace("a third-party table of API values fetched 2026-10-01", "a third-party copy of the API answer")),
    "codellama/CodeLlama-7b-hf": (6738546688, GGUF), "allenai/OLMo-1B-hf": (1176764416, GGUF),
    "HuggingFaceTB/SmolLM2-135M": (134515008, GGUF), "microsoft/phi-1_5": (1418270720, GGUF),
    "deepseek-ai/deepseek-coder-6.7b-base": (6740512768, GGUF), "allenai/OLMo-7B-hf": (6888095744, GGUF),
    "mistralai/Ministral-8B-Instruct-2410": (8019808256, GGUF), "ibm-granite/granite-3.1-2b-base": (2533531648, GGUF),
    "mistralai/Mistral-Large-Instruct-2407": (122610069504, GGUF), "Qwen/CodeQwen1.5-7B": (7250284544, GGUF),
    "01-ai/Yi-6B": (6061035520, GGUF), "01-ai/Yi-1.5-9B": (8829407232, GGUF), "01-ai/Yi-34B": (34388917248, GGUF),
    "deepseek-ai/deepseek-coder-1.3b-base": (1346471936, GGUF), "allenai/OLMo-2-0325-32B": (32234279936, GGUF),
    "EleutherAI/gpt-neox-20b": (20554567680, "GPT-NeoX-20B model description table, n_parameters {0:,} (third-party copy, via code search)"),
    "distilbert/distilgpt2": (81912576, GGUF), "upstage/SOLAR-10.7B-v1.0": (10731524096, GGUF),
    "openlm-research/open_llama_3b": (3426473600, "dense parameter count {0:,} in a third-party upcycling script for the 3B OpenLLaMA (via code search)"),
    "EleutherAI/pythia-14m": (14067712, GGUF), "EleutherAI/pythia-31m": (30494720, GGUF),
}
# Published counts of stored tensors that hold more than num_parameters(): (extra parameters, why)
STORED_EXTRA = {
    "meta-llama/Llama-2-70b-hf": (80 * 64, "the legacy checkpoint stores 80 x 64 rotary inv_freq entries"),
    "tiiuae/falcon-180B": (65024 * 14848, "the checkpoint stores lm_head.weight; transformers ties it to the embedding"),
}
VALUES = {"meta-llama/Llama-2-70b-hf": 68976653312, "tiiuae/falcon-180B": 179522565120}
for r in rows:
    if r["id"] in EXACT:
        n, where = EXACT[r["id"]]
        r["published_total"], r["published_source"] = n, where.format(n)
        if r["source"] == M:
            r["source"] = "from memory; the published exact total confirms the shapes"
    if r["id"] in STORED_EXTRA:
        extra, why = STORED_EXTRA[r["id"]]
        r["published_total"] = VALUES[r["id"]]
        r["published_extra"] = extra
        r["published_source"] = HFAPI.format(VALUES[r["id"]]) + f"; includes {extra:,} parameters more: {why}"
for r in rows:
    if r["id"] == "openai/gpt-oss-20b":
        r["source"] = GO + "; shapes from memory, matched by third-party copies of its config.json (EchoCog/gpt-oss-20b docs/gpt-oss-20b-architecture.md, via code search)"
out = {"about": ("Shapes of widely used open base models, for offline lookup. One entry per distinct published shape; "
                 "'id' is the canonical hub id, 'aliases' other ids of the same weights' shape. 'source' says where the shapes "
                 "come from ('from memory' means unverified); 'published_total' is the published total parameter count and "
                 "'published_source' where it is published (a rounded figure is checked to 0.5 %). Field names follow "
                 "cfgcheck.knowledge.models.Architecture."),
       "models": rows}
with open(Path(__file__).resolve().parents[1] / "cfgcheck" / "knowledge" / "base_models.json", "w", encoding="utf-8") as f:
    f.write('{\n "about": ' + json.dumps(out["about"]) + ',\n "models": [\n')
    f.write(",\n".join("  " + json.dumps(r, separators=(",", ":")) for r in rows))
    f.write("\n ],\n \"derived\": [\n")
    f.write(",\n".join("  " + json.dumps(r, separators=(",", ":")) for r in derived))
    f.write("\n ]\n}\n")
print(f"{len(rows)} entries written")
