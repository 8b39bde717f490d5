"""Key layouts: mapping tables from the keys people write to the fields of the typed view.

A layout is data: how to recognise it and, for each field of the view, the keys that fill it.
Adding a layout means adding a table here (and, for a new library, its known keys), never a rule.

Key specs:
* ``"learning_rate"`` — a bare name: found at the top level, or inside the known sections of the
  layout (``training: {learning_rate: ...}``), also with the section's prefix dropped
  (``lora: {alpha: 32}`` fills ``lora_alpha``).
* ``"=optimizer.params.lr"`` — an exact dotted path from the document root.
"""

from __future__ import annotations

from types import MappingProxyType

from ._records import _frozen_delattr, _frozen_setattr, _frozen_setstate, _setattr, guarded_repr


# method words most layouts share (PEFT / TRL scripts, axolotl's adapter, LLaMA-Factory's
# finetuning_type: lora | freeze | full)
METHOD_WORDS: MappingProxyType[str, str] = MappingProxyType({"lora": "lora", "qlora": "qlora", "full": "full", "freeze": "partial"})


class Layout:
    name: str
    title: str
    fields: dict[str, tuple[str, ...]]
    # keys whose presence says "this is a file of that layout", with a weight each
    signature: dict[str, int]
    min_score: int
    # the layout whose argument classes this one's reader extends (LLaMA-Factory parses into a
    # TrainingArguments subclass): once a key of ``extends_marks`` is present and the layout's own
    # signature reaches ``min_score``, the other layout's signature counts for it too, so a file
    # that writes mostly the shared keys is still recognised by the keys only its runner reads
    extends: str
    extends_marks: frozenset[str]
    # section names searched for bare names, and the prefixes a section lets you drop
    sections: dict[str, tuple[str, ...]]
    # fields a layout's own loader reads as numbers even when YAML 1.1 gives text
    coerces_numbers: bool
    # what a "method" value means in this layout: word -> "full" | "lora" | "qlora" | "partial"
    # (some layers train fully, the others stay frozen); a word not listed says nothing
    method_values: dict[str, str]
    # the method when nothing in the file states one (None: unknown)
    default_method: str | None
    # (regex, method) matched against the model builder name (component-style recipes)
    method_patterns: tuple[tuple[str, str], ...]
    # ``${a.b}`` interpolations inside the file are resolved when the view is filled
    interpolates: bool
    # the layout's own names for adapter target modules -> the transformers leaf name
    # (None: the layout uses the transformers module names)
    module_names: dict[str, str] | None
    # every key that names evaluation data is known, so "none present" means "no eval data"
    eval_data_known: bool
    # why this layout's loader reads ``2e-5`` as a number (shown in the YAML-version finding)
    number_reader: str
    # the number reading is the YAML loader's own (a float resolver), so it holds for every value
    # in the file, not only for the settings a validator types as numbers
    loader_reads_numbers: bool
    # section-local names: inside a section of that name, a key means the layout's bare name
    # (``model: {name_or_path: ...}`` is ``model_name_or_path``, ``scheduler: {type: ...}`` is
    # ``lr_scheduler_type``)
    section_names: dict[str, dict[str, str]]
    # sections whose keys describe another part of the run (evaluation, a reference or teacher
    # model, generation): only their section-local names are read (``eval: {steps: 50}`` is
    # ``eval_steps``), never a bare training name (``eval: {batch_size: 8}`` is not the train batch)
    restricted_sections: frozenset[str]
    # mappings never searched (another tool's inline config, free-form keyword arguments)
    foreign_sections: frozenset[str]
    # every other nested mapping is searched for bare names too (a section named as the author likes)
    search_all_sections: bool
    # the model a builder builds: (regex on the builder's last name, hub id the model resolver
    # knows), tried in order after a (q)lora_ prefix is dropped
    builder_models: tuple[tuple[str, str], ...]
    # a dotted path whose value is the model's folder (its config.json), used when no builder maps
    model_dir: str
    # a key naming the kind of method the file describes, the kinds the field table is written
    # for, and the fields read whatever the kind: PEFT's ``r`` and ``lora_alpha`` are LoRA's, while
    # an OFT config's ``r`` counts blocks (0 when ``oft_block_size`` is set) and a prompt-tuning
    # config has no rank at all
    kind_key: str
    kinds_described: frozenset[str]
    fields_for_any_kind: frozenset[str]
    # an experiment folder of the runner (``<experiments>/<method>/<name>/``): a file there is read
    # over the runner's defaults file (``experiment_defaults``, looked up from the folder above
    # ``<experiments>``, then inside it; a key the file writes replaces the default's whole value),
    # and the run trains the adapter of ``experiment_adapter`` beside it, or every weight without one
    experiment_root: str
    experiment_defaults: tuple[str, ...]
    experiment_adapter: str
    # what cfgcheck reads of this layout and what it does not (the layouts table in the docs)
    reads: str
    not_read: str

    # --- what the layout's runner does with the values: rules read these, never the name ---
    # what the file describes: "run" (a training recipe), "engine" (a DeepSpeed engine
    # config), "launch" (a launcher config: processes, machines, mixed precision), "adapter"
    # (a saved adapter's config)
    role: str
    # unset values take the transformers TrainingArguments defaults (batch 8, 3 epochs, eval
    # "no", save every 500 steps), because the file goes to TrainingArguments as it is
    trainer_defaults: bool
    # the file is parsed only into the argument classes of its repository's own scripts (no
    # transformers or TRL class among them): set when a run is opened, never in a table
    read_by_own_classes: bool
    # scheduler, warm-up and max_steps/epochs keys reach the transformers Trainer with its meaning
    trainer_schedule: bool
    # word lists (schema.CONSTRAINTS ``word_list``) the layout's values are checked against
    word_lists: frozenset[str]
    # the generated key table unknown-key checks keys against (None: keys are not judged)
    key_table: str | None
    # how a text value of the target-module setting is read: "regex" (PEFT matches it against
    # full module names), "comma-list" (split on commas), "comma-list-or-regex" (a list when it
    # has a comma, else PEFT's regex)
    targets_text: str
    # the runner's packing builds a block-causal mask itself, so packed samples never attend
    # across their boundaries whatever the attention kernel
    packing_masks_boundaries: bool
    # the key that caps the rows the runner reads from each dataset it lists (None: no such key)
    rows_cap_key: str | None
    # the runner refuses the "qlora" method word unless the base loads in 4 bits
    qlora_word_needs_4bit: bool
    # what fp16 means to the runner: "autocast" (mixed precision over the weights as loaded),
    # "loads-weights" (the fp16 flag also loads the weights as float16, so a full fine-tune
    # cannot use it), "refused" (the runner refuses fp16 training: bf16 or fp32 only)
    fp16_mode: str
    # the runner's validator refuses to merge an adapter into a quantised base ("" = it merges);
    # the text it stops with, {bits} for 4 or 8
    refuses_quantised_merge: str
    # what the runner fills in for a field the file leaves out: (field, value, note with the
    # source and the releases where it holds); supplied to the view as origin "default"
    defaults: tuple[tuple[str, object, str], ...]
    # the table of defaults that depend on other values (``defaults.DEFAULTS[name]``: functions
    # of the view), None when the runner has none
    defaults_table: str | None
    # the key without which the runner never resizes the embedding for added tokens ("" = it always
    # resizes). With it, the runner turns it on itself for explicitly added tokens, and a resized
    # run with no trainable-module list written gets the embedding and head added to that list
    vocab_resize_key: str
    # a token list and the trainable-module list may be written as one comma-separated text
    comma_token_lists: bool
    # the runner's registered chat templates that add special tokens: name -> those tokens
    template_stop_words: dict[str, tuple[str, ...]]

    __slots__ = ('name', 'title', 'fields', 'signature', 'min_score', 'extends', 'extends_marks', 'sections', 'coerces_numbers', 'method_values', 'default_method', 'method_patterns', 'interpolates', 'module_names', 'eval_data_known', 'number_reader', 'loader_reads_numbers', 'section_names', 'restricted_sections', 'foreign_sections', 'search_all_sections', 'builder_models', 'model_dir', 'kind_key', 'kinds_described', 'fields_for_any_kind', 'experiment_root', 'experiment_defaults', 'experiment_adapter', 'reads', 'not_read', 'role', 'trainer_defaults', 'read_by_own_classes', 'trainer_schedule', 'word_lists', 'key_table', 'targets_text', 'packing_masks_boundaries', 'rows_cap_key', 'qlora_word_needs_4bit', 'fp16_mode', 'refuses_quantised_merge', 'defaults', 'defaults_table', 'vocab_resize_key', 'comma_token_lists', 'template_stop_words')

    def __init__(self, name, title, fields, signature, min_score=2, extends="", extends_marks=frozenset(), sections=None, coerces_numbers=False, method_values=None, default_method=None, method_patterns=(), interpolates=False, module_names=None, eval_data_known=False, number_reader="", loader_reads_numbers=False, section_names=None, restricted_sections=frozenset(), foreign_sections=frozenset(), search_all_sections=False, builder_models=(), model_dir="", kind_key="", kinds_described=frozenset(), fields_for_any_kind=frozenset(), experiment_root="", experiment_defaults=(), experiment_adapter="", reads="", not_read="", role="run", trainer_defaults=False, read_by_own_classes=False, trainer_schedule=False, word_lists=frozenset(), key_table=None, targets_text="regex", packing_masks_boundaries=False, rows_cap_key=None, qlora_word_needs_4bit=False, fp16_mode="autocast", refuses_quantised_merge="", defaults=(), defaults_table=None, vocab_resize_key="", comma_token_lists=False, template_stop_words=None):
        _setattr(self, 'name', name)
        _setattr(self, 'title', title)
        _setattr(self, 'fields', fields)
        _setattr(self, 'signature', signature)
        _setattr(self, 'min_score', min_score)
        _setattr(self, 'extends', extends)
        _setattr(self, 'extends_marks', extends_marks)
        _setattr(self, 'sections', {} if sections is None else sections)
        _setattr(self, 'coerces_numbers', coerces_numbers)
        _setattr(self, 'method_values', dict(METHOD_WORDS) if method_values is None else method_values)
        _setattr(self, 'default_method', default_method)
        _setattr(self, 'method_patterns', method_patterns)
        _setattr(self, 'interpolates', interpolates)
        _setattr(self, 'module_names', module_names)
        _setattr(self, 'eval_data_known', eval_data_known)
        _setattr(self, 'number_reader', number_reader)
        _setattr(self, 'loader_reads_numbers', loader_reads_numbers)
        _setattr(self, 'section_names', {} if section_names is None else section_names)
        _setattr(self, 'restricted_sections', restricted_sections)
        _setattr(self, 'foreign_sections', foreign_sections)
        _setattr(self, 'search_all_sections', search_all_sections)
        _setattr(self, 'builder_models', builder_models)
        _setattr(self, 'model_dir', model_dir)
        _setattr(self, 'kind_key', kind_key)
        _setattr(self, 'kinds_described', kinds_described)
        _setattr(self, 'fields_for_any_kind', fields_for_any_kind)
        _setattr(self, 'experiment_root', experiment_root)
        _setattr(self, 'experiment_defaults', experiment_defaults)
        _setattr(self, 'experiment_adapter', experiment_adapter)
        _setattr(self, 'reads', reads)
        _setattr(self, 'not_read', not_read)
        _setattr(self, 'role', role)
        _setattr(self, 'trainer_defaults', trainer_defaults)
        _setattr(self, 'read_by_own_classes', read_by_own_classes)
        _setattr(self, 'trainer_schedule', trainer_schedule)
        _setattr(self, 'word_lists', word_lists)
        _setattr(self, 'key_table', key_table)
        _setattr(self, 'targets_text', targets_text)
        _setattr(self, 'packing_masks_boundaries', packing_masks_boundaries)
        _setattr(self, 'rows_cap_key', rows_cap_key)
        _setattr(self, 'qlora_word_needs_4bit', qlora_word_needs_4bit)
        _setattr(self, 'fp16_mode', fp16_mode)
        _setattr(self, 'refuses_quantised_merge', refuses_quantised_merge)
        _setattr(self, 'defaults', defaults)
        _setattr(self, 'defaults_table', defaults_table)
        _setattr(self, 'vocab_resize_key', vocab_resize_key)
        _setattr(self, 'comma_token_lists', comma_token_lists)
        _setattr(self, 'template_stop_words', {} if template_stop_words is None else template_stop_words)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, title={self.title!r}, fields={self.fields!r}, signature={self.signature!r}, min_score={self.min_score!r}, extends={self.extends!r}, extends_marks={self.extends_marks!r}, sections={self.sections!r}, coerces_numbers={self.coerces_numbers!r}, method_values={self.method_values!r}, default_method={self.default_method!r}, method_patterns={self.method_patterns!r}, interpolates={self.interpolates!r}, module_names={self.module_names!r}, eval_data_known={self.eval_data_known!r}, number_reader={self.number_reader!r}, loader_reads_numbers={self.loader_reads_numbers!r}, section_names={self.section_names!r}, restricted_sections={self.restricted_sections!r}, foreign_sections={self.foreign_sections!r}, search_all_sections={self.search_all_sections!r}, builder_models={self.builder_models!r}, model_dir={self.model_dir!r}, kind_key={self.kind_key!r}, kinds_described={self.kinds_described!r}, fields_for_any_kind={self.fields_for_any_kind!r}, experiment_root={self.experiment_root!r}, experiment_defaults={self.experiment_defaults!r}, experiment_adapter={self.experiment_adapter!r}, reads={self.reads!r}, not_read={self.not_read!r}, role={self.role!r}, trainer_defaults={self.trainer_defaults!r}, read_by_own_classes={self.read_by_own_classes!r}, trainer_schedule={self.trainer_schedule!r}, word_lists={self.word_lists!r}, key_table={self.key_table!r}, targets_text={self.targets_text!r}, packing_masks_boundaries={self.packing_masks_boundaries!r}, rows_cap_key={self.rows_cap_key!r}, qlora_word_needs_4bit={self.qlora_word_needs_4bit!r}, fp16_mode={self.fp16_mode!r}, refuses_quantised_merge={self.refuses_quantised_merge!r}, defaults={self.defaults!r}, defaults_table={self.defaults_table!r}, vocab_resize_key={self.vocab_resize_key!r}, comma_token_lists={self.comma_token_lists!r}, template_stop_words={self.template_stop_words!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.title, self.fields, self.signature, self.min_score, self.extends, self.extends_marks, self.sections, self.coerces_numbers, self.method_values, self.default_method, self.method_patterns, self.interpolates, self.module_names, self.eval_data_known, self.number_reader, self.loader_reads_numbers, self.section_names, self.restricted_sections, self.foreign_sections, self.search_all_sections, self.builder_models, self.model_dir, self.kind_key, self.kinds_described, self.fields_for_any_kind, self.experiment_root, self.experiment_defaults, self.experiment_adapter, self.reads, self.not_read, self.role, self.trainer_defaults, self.read_by_own_classes, self.trainer_schedule, self.word_lists, self.key_table, self.targets_text, self.packing_masks_boundaries, self.rows_cap_key, self.qlora_word_needs_4bit, self.fp16_mode, self.refuses_quantised_merge, self.defaults, self.defaults_table, self.vocab_resize_key, self.comma_token_lists, self.template_stop_words) == (other.name, other.title, other.fields, other.signature, other.min_score, other.extends, other.extends_marks, other.sections, other.coerces_numbers, other.method_values, other.default_method, other.method_patterns, other.interpolates, other.module_names, other.eval_data_known, other.number_reader, other.loader_reads_numbers, other.section_names, other.restricted_sections, other.foreign_sections, other.search_all_sections, other.builder_models, other.model_dir, other.kind_key, other.kinds_described, other.fields_for_any_kind, other.experiment_root, other.experiment_defaults, other.experiment_adapter, other.reads, other.not_read, other.role, other.trainer_defaults, other.read_by_own_classes, other.trainer_schedule, other.word_lists, other.key_table, other.targets_text, other.packing_masks_boundaries, other.rows_cap_key, other.qlora_word_needs_4bit, other.fp16_mode, other.refuses_quantised_merge, other.defaults, other.defaults_table, other.vocab_resize_key, other.comma_token_lists, other.template_stop_words)
        return NotImplemented

    def __hash__(self):
        return hash((self.name, self.title, self.fields, self.signature, self.min_score, self.extends, self.extends_marks, self.sections, self.coerces_numbers, self.method_values, self.default_method, self.method_patterns, self.interpolates, self.module_names, self.eval_data_known, self.number_reader, self.loader_reads_numbers, self.section_names, self.restricted_sections, self.foreign_sections, self.search_all_sections, self.builder_models, self.model_dir, self.kind_key, self.kinds_described, self.fields_for_any_kind, self.experiment_root, self.experiment_defaults, self.experiment_adapter, self.reads, self.not_read, self.role, self.trainer_defaults, self.read_by_own_classes, self.trainer_schedule, self.word_lists, self.key_table, self.targets_text, self.packing_masks_boundaries, self.rows_cap_key, self.qlora_word_needs_4bit, self.fp16_mode, self.refuses_quantised_merge, self.defaults, self.defaults_table, self.vocab_resize_key, self.comma_token_lists, self.template_stop_words))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.name, self.title, self.fields, self.signature, self.min_score, self.extends, self.extends_marks, self.sections, self.coerces_numbers, self.method_values, self.default_method, self.method_patterns, self.interpolates, self.module_names, self.eval_data_known, self.number_reader, self.loader_reads_numbers, self.section_names, self.restricted_sections, self.foreign_sections, self.search_all_sections, self.builder_models, self.model_dir, self.kind_key, self.kinds_described, self.fields_for_any_kind, self.experiment_root, self.experiment_defaults, self.experiment_adapter, self.reads, self.not_read, self.role, self.trainer_defaults, self.read_by_own_classes, self.trainer_schedule, self.word_lists, self.key_table, self.targets_text, self.packing_masks_boundaries, self.rows_cap_key, self.qlora_word_needs_4bit, self.fp16_mode, self.refuses_quantised_merge, self.defaults, self.defaults_table, self.vocab_resize_key, self.comma_token_lists, self.template_stop_words)

    __setstate__ = _frozen_setstate

    @property
    def has_bare_names(self) -> bool:
        """Whether any key spec is a bare name (searched in sections) rather than a root path."""
        return any(not s.startswith("=") for specs in self.fields.values() for s in specs)


# The field types the view knows; the type rule checks values against them.
FIELD_TYPES: MappingProxyType[str, str] = MappingProxyType({
    "method": "str",
    "model.ref": "str",
    "model.dtype": "str",
    "model.attention": "str",
    "adapter.enabled": "bool",
    "adapter.kind": "str",
    "adapter.rank": "int",
    "adapter.alpha": "number",
    "adapter.rslora": "bool",
    "adapter.dropout": "number",
    "adapter.targets": "names",
    "adapter.save_modules": "names",
    "adapter.init": "any",
    "adapter.dora": "bool",
    "adapter.bias": "str",
    "quant.load_4bit": "bool",
    "quant.load_8bit": "bool",
    "quant.type_4bit": "str",
    "quant.double": "bool",
    "quant.compute_dtype": "str",
    "optim.lr": "number",
    "optim.name": "str",
    "optim.scheduler": "str",
    "optim.scheduler_kwargs": "any",
    "optim.warmup_ratio": "number",
    "optim.warmup_steps": "number",
    "optim.epochs": "number",
    "optim.max_steps": "int",
    "optim.weight_decay": "number",
    "optim.grad_clip": "number",
    "batch.per_device": "int",
    "batch.accumulation": "int",
    "batch.global": "int",
    "precision.bf16": "bool",
    "precision.fp16": "bool",
    "precision.tf32": "bool",
    "precision.mixed": "str",
    "data.seq_len": "int",
    "data.packing": "bool",
    "data.chat_template": "str",
    "data.new_tokens": "names",
    "data.rows": "int",
    "cadence.eval_strategy": "str",
    "cadence.eval_steps": "number",
    "cadence.save_strategy": "str",
    "cadence.save_steps": "number",
    "cadence.logging_steps": "number",
    "cadence.load_best": "bool",
    "runtime.gradient_checkpointing": "bool",
    "runtime.use_cache": "bool",
    "runtime.deepspeed": "any",
    "runtime.zero_stage": "int",
    "runtime.fsdp": "any",
    "hardware.num_gpus": "int",
    "hardware.num_machines": "int",
    # added with the recipe-runner and launcher layouts
    "model.builder": "str",
    "model.flash_attention": "bool",
    "adapter.target_all_linear": "bool",
    "adapter.mlp": "bool",
    "adapter.output": "bool",
    "adapter.loftq": "any",
    "adapter.kernel_mlp": "bool",
    "adapter.kernel_qkv": "bool",
    "adapter.kernel_o": "bool",
    "quant.bits": "int",
    "export.merge": "any",
    "optim.embedding_lr": "number",
    "data.eval": "any",
    "cadence.evals_per_epoch": "int",
    "cadence.saves_per_epoch": "int",
    "runtime.distributed": "str",
    "runtime.fsdp": "any",
    "launch.num_machines": "int",
    "adapter.tie": "bool",
    # read by the distributed, preference/RL and trainability rules
    "runtime.zero3_save_16bit": "bool",
    "runtime.zero3_init": "bool",
    "runtime.ddp_find_unused": "bool",
    "runtime.gc_reentrant": "bool",
    "runtime.fsdp_checkpointing": "bool",
    "runtime.fsdp_wrap": "names",
    "runtime.fsdp_version": "int",
    "runtime.fsdp_sharding": "any",
    "model.device_map": "any",
    "model.low_cpu_mem": "bool",
    "quant.storage": "str",
    "rl.num_generations": "int",
    "rl.generation_batch": "int",
    "rl.steps_per_generation": "int",
    "rl.max_new_tokens": "int",
    "rl.engine_max_len": "int",
    "rl.use_vllm": "bool",
    "data.max_length": "int",
    "data.max_prompt": "int",
    "data.max_completion": "int",
    "data.padding_free": "bool",
    "data.completion_only": "bool",
    "data.assistant_only": "bool",
    "tokenizer.pad_token": "str",
    "tokenizer.eos_token": "str",
    # chat-format settings of the recipe runners
    "data.special_tokens": "any",  # role -> token (bos/eos/unk/pad), additional_special_tokens list
    "data.template_name": "str",  # a runner's registered chat template, by name
    "model.resize_vocab": "bool",
    "adapter.unfrozen": "names",  # regex patterns of parameters left trainable
    "adapter.trainable_tokens": "any",  # token rows of the embedding trained (PEFT trainable tokens)
})

# Field specs of the same rules, one block per layout (kept together so the tables stay readable)
_RULE_FIELDS_TRAINER: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    "runtime.ddp_find_unused": ("ddp_find_unused_parameters",),
    "runtime.gc_reentrant": ("=gradient_checkpointing_kwargs.use_reentrant",
                             "=activation_checkpointing_kwargs.use_reentrant"),
    "runtime.fsdp_checkpointing": ("=fsdp_config.activation_checkpointing",
                                   "=fsdp_config.fsdp_activation_checkpointing"),
    "runtime.fsdp_wrap": ("=fsdp_config.transformer_layer_cls_to_wrap",
                          "=fsdp_config.fsdp_transformer_layer_cls_to_wrap"),
    "runtime.fsdp_version": ("=fsdp_config.fsdp_version", "=fsdp_config.version"),
    "model.device_map": ("device_map", "=model_init_kwargs.device_map"),
    "model.low_cpu_mem": ("low_cpu_mem_usage", "=model_init_kwargs.low_cpu_mem_usage"),
    "quant.storage": ("bnb_4bit_quant_storage",),
    "rl.num_generations": ("num_generations",),
    "rl.generation_batch": ("generation_batch_size",),
    "rl.steps_per_generation": ("steps_per_generation",),
    "rl.max_new_tokens": ("max_new_tokens",),
    "rl.engine_max_len": ("vllm_max_model_length", "vllm_max_model_len"),
    "rl.use_vllm": ("use_vllm",),
    "data.max_length": ("max_length",),
    "data.max_prompt": ("max_prompt_length",),
    "data.max_completion": ("max_completion_length",),
    "data.padding_free": ("padding_free",),
    "data.completion_only": ("completion_only_loss",),
    "data.assistant_only": ("assistant_only_loss",),
    "tokenizer.pad_token": ("pad_token",),
    "tokenizer.eos_token": ("eos_token",),
})
_RULE_FIELDS_DEEPSPEED: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    "runtime.zero3_save_16bit": ("=zero_optimization.stage3_gather_16bit_weights_on_model_save",
                                 "=zero_optimization.stage3_gather_fp16_weights_on_model_save"),
})
_RULE_FIELDS_ACCELERATE: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    "runtime.zero3_save_16bit": ("=deepspeed_config.zero3_save_16bit_model",),
    "runtime.zero3_init": ("=deepspeed_config.zero3_init_flag",),
    "runtime.fsdp_wrap": ("=fsdp_config.fsdp_transformer_layer_cls_to_wrap",),
    "runtime.fsdp_version": ("=fsdp_config.fsdp_version",),
})
_RULE_FIELDS_AXOLOTL: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    "model.device_map": ("device_map",),
    "model.low_cpu_mem": ("low_cpu_mem_usage",),
    "quant.storage": ("bnb_4bit_quant_storage",),
    "runtime.ddp_find_unused": ("ddp_find_unused_parameters",),
    "runtime.gc_reentrant": ("=gradient_checkpointing_kwargs.use_reentrant",),
    "runtime.fsdp_wrap": ("=fsdp_config.fsdp_transformer_layer_cls_to_wrap",
                          "=fsdp_config.transformer_layer_cls_to_wrap"),
    "runtime.fsdp_version": ("=fsdp_config.fsdp_version", "=fsdp_version"),
    "runtime.fsdp_sharding": ("fsdp",),
    "runtime.fsdp_checkpointing": ("=fsdp_config.fsdp_activation_checkpointing",
                                   "=fsdp_config.activation_checkpointing"),
    "rl.num_generations": ("=trl.num_generations",),
    "rl.max_new_tokens": ("=trl.max_new_tokens",),
    "data.max_completion": ("=trl.max_completion_length",),
    "tokenizer.pad_token": ("=special_tokens.pad_token",),
    "tokenizer.eos_token": ("=special_tokens.eos_token",),
})

_TRAINER_SECTIONS: MappingProxyType[str, tuple[str, ...]] = MappingProxyType({
    # section name -> prefixes that may be dropped inside it
    "model": (),
    "model_args": (),
    "model_arguments": (),
    "lora": ("lora_",),
    "peft": ("lora_",),
    "peft_config": ("lora_",),
    "adapter": ("lora_",),
    "training": (),
    "train": (),
    "training_args": (),
    "training_arguments": (),
    "trainer": (),
    "args": (),
    "hyperparameters": (),
    "data": (),
    "data_args": (),
    "dataset": (),
    "tokenizer": (),
    "optim": (),
    "optimizer": (),
    "optimization": (),
    "quantization": ("bnb_4bit_",),
    "quantization_config": ("bnb_4bit_",),
    "bnb": ("bnb_4bit_",),
    "quant": ("bnb_4bit_",),
    "bitsandbytes": ("bnb_4bit_",),
    "lora_config": ("lora_",),
    "evaluation": (),
    "eval": (),
    "logging": (),
    "checkpointing": (),
    "precision": (),
    "hardware": (),
    "distributed": (),
})

def _same(names: str, target: str) -> dict[str, str]:
    return {n: target for n in names.split()}


# Section-local names of trainer-style files, by what a section holds. The section words and the
# local names are common practice in training repositories (no source); a local name is mapped
# only where it cannot mean another setting in that kind of section.
_MODEL_NAMES = MappingProxyType({**_same("name_or_path name path id model_id repo_id pretrained checkpoint hub_id model_name "
                         "model_path base_model base_model_id pretrained_model hf_name hf_path", "model_name_or_path"),
                **_same("dtype torch_dtype", "torch_dtype"),
                **_same("attn_implementation attention attn", "attn_implementation"),
                **_same("max_seq_length max_seq_len max_length context_length", "max_seq_length")})
_SCHEDULE_NAMES = MappingProxyType({**_same("type name kind scheduler lr_scheduler_type", "lr_scheduler_type"),
                   **_same("warmup_steps num_warmup_steps", "warmup_steps"),
                   # a schedule section often says how long the run is
                   **_same("epochs num_epochs", "num_train_epochs"),
                   **_same("total_steps num_training_steps train_steps max_train_steps", "max_steps"),
                   **_same("warmup_ratio warmup_fraction", "warmup_ratio")})
_OPTIM_NAMES = MappingProxyType({**_same("name type kind optimizer", "optim"), **_same("lr learning_rate", "learning_rate"),
                # an optimiser section often holds the schedule beside it
                **_same("scheduler lr_scheduler schedule lr_schedule", "lr_scheduler_type"),
                "num_warmup_steps": "warmup_steps",
                **_same("weight_decay wd", "weight_decay"),
                **_same("max_grad_norm grad_clip clip_grad_norm gradient_clipping", "max_grad_norm")})
_ADAPTER_NAMES = MappingProxyType({**_same("r rank", "lora_r"), "alpha": "lora_alpha", "dropout": "lora_dropout",
                  **_same("target_modules targets target modules", "lora_target_modules"),
                  **_same("enabled enable use", "use_peft"), "rslora": "use_rslora", "dora": "use_dora",
                  **_same("type method kind peft_type", "finetuning_method")})
_QUANT_NAMES = MappingProxyType({**_same("quant_type type", "bnb_4bit_quant_type"),
                **_same("double_quant use_double_quant nested", "bnb_4bit_use_double_quant"),
                "compute_dtype": "bnb_4bit_compute_dtype", "4bit": "load_in_4bit", "8bit": "load_in_8bit",
                **_same("bits quant_bits", "quantization_bits")})
_TRAIN_NAMES = MappingProxyType({**_same("batch_size micro_batch_size per_device_batch_size batch_size_per_device "
                        "train_micro_batch_size", "per_device_train_batch_size"),
                **_same("epochs num_epochs", "num_train_epochs"), "lr": "learning_rate",
                **_same("total_steps num_training_steps train_steps max_train_steps", "max_steps"),
                **_same("grad_accum gradient_accumulation accumulation_steps grad_accumulation_steps "
                        "grad_accumulation", "gradient_accumulation_steps"),
                **_same("grad_clip clip_grad_norm", "max_grad_norm")})
_DATA_NAMES = MappingProxyType({**_same("max_length max_seq_len seq_len sequence_length sequence_len context_length "
                       "block_size cutoff_len", "max_seq_length"), "pack": "packing"})
_EVAL_NAMES = MappingProxyType({**_same("steps every_n_steps interval eval_steps", "eval_steps"),
               **_same("strategy eval_strategy", "eval_strategy")})
_LOG_NAMES = _same("steps every_n_steps interval logging_steps", "logging_steps")
_SAVE_NAMES = MappingProxyType({**_same("steps every_n_steps interval save_steps", "save_steps"),
               **_same("strategy save_strategy", "save_strategy")})
_HARDWARE_NAMES = MappingProxyType({**_same("gpus num_gpus gpus_per_node", "num_gpus"), **_same("nodes num_nodes", "num_nodes")})


def _kinds(**groups: tuple[str, dict[str, str]]) -> dict[str, dict[str, str]]:
    out: dict[str, dict[str, str]] = {}
    for words, names in groups.values():
        for w in words.split():
            out[w] = names
    return out


_TRAINER_SECTION_NAMES = _kinds(
    model=("model model_args model_arguments model_config base_model llm backbone", _MODEL_NAMES),
    schedule=("schedule scheduler lr_schedule lr_scheduler learning_rate_schedule sched scheduler_config "
              "lr_scheduler_config schedule_config", _SCHEDULE_NAMES),
    optim=("optim optimizer optimiser optimization optimisation optimizer_config optimizer_args optim_config",
           _OPTIM_NAMES),
    adapter=("lora peft peft_config adapter adapters lora_config lora_args peft_args lora_params peft_params "
             "lora_hparams lora_settings", _ADAPTER_NAMES),
    quant=("quantization quantization_config quant bnb bitsandbytes quant_config bnb_config quantisation "
           "quantisation_config quantization_args", _QUANT_NAMES),
    train=("training train trainer training_args training_arguments args hyperparameters hparams run config "
           "train_config training_config trainer_config trainer_args train_args hyperparams params settings "
           "sft sft_config dpo dpo_config grpo grpo_config orpo kto finetune finetuning fine_tuning "
           "training_hparams train_hparams train_params training_params trainer_kwargs training_kwargs sft_args",
           _TRAIN_NAMES),
    data=("data data_args data_arguments dataset tokenizer data_config dataset_config data_params", _DATA_NAMES),
    eval=("eval evaluation validation val", _EVAL_NAMES),
    log=("logging log", _LOG_NAMES),
    save=("checkpointing checkpoint checkpoints save saving", _SAVE_NAMES),
    hardware=("hardware distributed compute resources", _HARDWARE_NAMES),
)

TRAINER = Layout(
    name="trainer",
    defaults_table="trainer",  # defaults.DEFAULTS
    title="trainer-style arguments (transformers / PEFT / TRL names, flat or in sections)",
    sections={**_TRAINER_SECTIONS, **{w: _TRAINER_SECTIONS.get(w, ()) for w in _TRAINER_SECTION_NAMES}},
    section_names=_TRAINER_SECTION_NAMES,
    restricted_sections=frozenset("eval evaluation validation val test".split()),
    foreign_sections=frozenset("teacher teacher_model ref_model reference_model ref reward_model critic "
                               "value_model draft_model judge vllm generation generation_config gen_kwargs "
                               "generation_kwargs inference deepspeed fsdp_config accelerate hydra".split()),
    search_all_sections=True,
    reads="top-level transformers / PEFT / TRL argument names; the same names inside any section, "
          "with section-local names by what the section holds (model: name_or_path, scheduler: type, "
          "optim: lr, lora: r, quantization: quant_type, training: batch_size, eval: steps)",
    not_read="keys of evaluation, reference/teacher-model and generation sections as training settings; "
             "inline DeepSpeed and FSDP mappings (read as linked configs)",
    default_method="full",  # no adapter anywhere: every weight trains
    trainer_defaults=True,
    trainer_schedule=True,
    word_lists=frozenset({"transformers-arguments", "transformers-strategies", "peft-lora"}),
    key_table="trainer",
    fields={
        "method": ("finetuning_method", "tuning_method"),
        "model.ref": ("model_name_or_path", "base_model_name_or_path", "pretrained_model_name_or_path",
                      "base_model", "model_id", "model", "model_name", "model_path"),
        "model.dtype": ("torch_dtype", "model_dtype", "dtype"),
        "model.attention": ("attn_implementation",),
        "adapter.enabled": ("use_peft", "use_lora"),
        "adapter.rank": ("lora_r", "r", "lora_rank"),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target_modules", "target_modules"),
        "adapter.save_modules": ("lora_modules_to_save", "modules_to_save"),
        "adapter.init": ("init_lora_weights",),
        "adapter.dora": ("use_dora",),
        "adapter.bias": ("lora_bias",),
        "adapter.tie": ("ensure_weight_tying",),
        "adapter.loftq": ("loftq_config",),
        "quant.load_4bit": ("load_in_4bit",),
        "quant.load_8bit": ("load_in_8bit",),
        "quant.type_4bit": ("bnb_4bit_quant_type",),
        "quant.double": ("bnb_4bit_use_double_quant", "use_bnb_nested_quant"),
        "quant.compute_dtype": ("bnb_4bit_compute_dtype",),
        "quant.bits": ("quantization_bits", "quantization_bit"),
        "optim.lr": ("learning_rate", "lr"),
        "optim.name": ("optim",),
        # num_warmup_steps: the name of transformers' no-trainer example scripts
        # (run_clm_no_trainer.py: --lr_scheduler_type, --num_warmup_steps)
        "optim.scheduler": ("lr_scheduler_type",),
        "optim.scheduler_kwargs": ("lr_scheduler_kwargs",),
        "optim.warmup_ratio": ("warmup_ratio",),
        "optim.warmup_steps": ("warmup_steps", "num_warmup_steps"),
        "optim.epochs": ("num_train_epochs",),
        # max_train_steps: transformers' no-trainer examples ("If provided, overrides num_train_epochs")
        "optim.max_steps": ("max_steps", "max_train_steps"),
        "optim.weight_decay": ("weight_decay",),
        "optim.grad_clip": ("max_grad_norm",),
        "batch.per_device": ("per_device_train_batch_size",),
        "batch.accumulation": ("gradient_accumulation_steps",),
        "batch.global": ("global_batch_size", "total_batch_size", "effective_batch_size"),
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("max_seq_length", "max_length", "model_max_length"),
        "data.packing": ("packing",),
        "data.chat_template": ("chat_template",),
        "data.new_tokens": ("added_tokens", "new_special_tokens", "additional_special_tokens"),
        "data.rows": ("num_train_rows", "train_rows"),
        "cadence.eval_strategy": ("eval_strategy", "evaluation_strategy"),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.gradient_checkpointing": ("gradient_checkpointing",),
        "runtime.use_cache": ("use_cache",),
        "runtime.deepspeed": ("deepspeed",),
        "runtime.fsdp": ("fsdp",),
        "hardware.num_gpus": ("num_gpus", "world_size", "nproc_per_node"),
        "hardware.num_machines": ("num_nodes", "nnodes"),
        **_RULE_FIELDS_TRAINER,
    },
    signature={
        "learning_rate": 2, "per_device_train_batch_size": 3, "gradient_accumulation_steps": 2,
        "num_train_epochs": 2, "model_name_or_path": 3, "lora_r": 3, "lora_alpha": 3,
        "output_dir": 1, "bf16": 1, "fp16": 1, "max_steps": 1, "warmup_ratio": 2, "warmup_steps": 1,
        "lr_scheduler_type": 2, "save_steps": 1, "eval_steps": 1, "logging_steps": 1,
        "load_in_4bit": 2, "use_peft": 2, "target_modules": 1, "lora_target_modules": 2,
        "max_seq_length": 1, "gradient_checkpointing": 1, "optim": 1, "lora_dropout": 2,
        "eval_strategy": 1, "save_strategy": 1, "chat_template": 1, "torch_dtype": 1,
        "dataset_name": 1, "dataset_mixture": 1, "r": 0,
    },
)

DEEPSPEED = Layout(
    name="deepspeed",
    defaults_table="deepspeed",  # defaults.DEFAULTS
    title="DeepSpeed configuration JSON",
    role="engine",
    word_lists=frozenset({"deepspeed"}),
    key_table="deepspeed",
    fields={
        "batch.per_device": ("=train_micro_batch_size_per_gpu",),
        "batch.accumulation": ("=gradient_accumulation_steps",),
        "batch.global": ("=train_batch_size",),
        "precision.bf16": ("=bf16.enabled", "=bfloat16.enabled"),
        "precision.fp16": ("=fp16.enabled",),
        "optim.lr": ("=optimizer.params.lr",),
        "optim.name": ("=optimizer.type",),
        "optim.scheduler": ("=scheduler.type",),
        "optim.warmup_steps": ("=scheduler.params.warmup_num_steps",),
        "optim.weight_decay": ("=optimizer.params.weight_decay",),
        "optim.grad_clip": ("=gradient_clipping",),
        "runtime.zero_stage": ("=zero_optimization.stage",),
        **_RULE_FIELDS_DEEPSPEED,
    },
    signature={
        "train_batch_size": 3, "train_micro_batch_size_per_gpu": 3, "zero_optimization": 3,
        "gradient_clipping": 1, "steps_per_print": 2, "wall_clock_breakdown": 2,
        "zero_allow_untested_optimizer": 2, "fp16": 1, "bf16": 1, "optimizer": 1, "scheduler": 1,
        "gradient_accumulation_steps": 1, "bfloat16": 1, "amp": 1, "flops_profiler": 2,
        "activation_checkpointing": 1, "tensorboard": 1, "autotuning": 2,
    },
    min_score=3,
)

PEFT_ADAPTER = Layout(
    name="peft-adapter",
    title="PEFT adapter_config.json",
    role="adapter",
    default_method="lora",  # a saved adapter's config: the run that made it trained an adapter
    word_lists=frozenset({"peft-lora"}),
    key_table="peft-adapter",
    fields={
        "model.ref": ("=base_model_name_or_path",),
        "adapter.rank": ("=r",),
        "adapter.alpha": ("=lora_alpha",),
        "adapter.rslora": ("=use_rslora",),
        "adapter.dropout": ("=lora_dropout",),
        "adapter.targets": ("=target_modules",),
        "adapter.save_modules": ("=modules_to_save",),
        "adapter.init": ("=init_lora_weights",),
        "adapter.dora": ("=use_dora",),
        "adapter.bias": ("=bias",),
        "adapter.tie": ("=ensure_weight_tying",),
        "adapter.loftq": ("=loftq_config",),
    },
    # PEFT 0.21 tuners/lora/config.py LoraConfig (and AdaLoraConfig, its subclass) define the
    # keys the table reads; other tuners (OFT, BOFT, VeRA, IA3, prompt tuning, ...) reuse some names
    # with other meanings
    kind_key="peft_type",
    kinds_described=frozenset({"LORA", "ADALORA"}),
    fields_for_any_kind=frozenset({"model.ref", "adapter.save_modules"}),
    not_read="the LoRA fields of adapters of other PEFT types (peft_type OFT, VERA, PROMPT_TUNING, ...)",
    signature={"peft_type": 4, "base_model_name_or_path": 1, "task_type": 1, "r": 1,
               "lora_alpha": 1, "target_modules": 1, "fan_in_fan_out": 2, "inference_mode": 2},
    min_score=5,
)

# ---------------------------------------------------------------------------------------------
# Recipe runners and launchers

AXOLOTL = Layout(
    name="axolotl",
    defaults_table="axolotl",  # defaults.DEFAULTS
    key_table="axolotl",  # the runner's own key list (knowledge/runner_keys.json)
    not_read="chat_template / chat_template_jinja for the vocabulary: axolotl sets the template "
             "string only, so its markers stay text unless tokens / special_tokens add them",
    title="axolotl-style recipe (adapter: lora|qlora, lora_r, micro_batch_size, num_epochs)",
    # axolotl reads the YAML with yaml.safe_load, then validates it with a pydantic settings
    # model: learning_rate is `str | float` with a validator that calls float() on text
    # (axolotl 0.19.0 utils/schemas/training.py, convert_learning_rate), and float fields are
    # coerced by pydantic's lax mode.
    coerces_numbers=True,
    number_reader="axolotl validates the file with a pydantic model that converts this text to a float",
    # axolotl utils/schemas/config.py check_qlora: adapter qlora + merge_lora + load_in_4bit/8bit raises
    refuses_quantised_merge="Can't merge qlora if loaded in {bits}bit",
    default_method="full",
    trainer_schedule=True,  # its scheduler and warm-up keys become TrainingArguments
    word_lists=frozenset({"transformers-strategies"}),
    targets_text="comma-list-or-regex",
    # validation: "Require cfg.load_in_4bit to be True for qlora" (axolotl utils/schemas/config.py)
    qlora_word_needs_4bit=True,
    # resolve_dtype (axolotl utils/config/__init__.py): fp16 -> cfg.torch_dtype = torch.float16,
    # so the weights load in fp16 and a full fine-tune stops at "Attempting to unscale FP16
    # gradients" (axolotl bug report #1031); bf16 off and fp16 unset loads float32
    fp16_mode="loads-weights",
    # axolotl turns evaluation off itself when there is no eval data (core/builders/base.py)
    # fsdp_config: axolotl drops the `fsdp_` prefix of its keys (0.19.0 utils/schemas/validation.py)
    sections={"peft": ("lora_",), "loftq_config": ("loftq_",), "bnb_config_kwargs": (),
              "fsdp_config": ("fsdp_",)},
    fields={
        "method": ("adapter",),
        "model.ref": ("base_model",),
        "model.dtype": ("torch_dtype",),
        "model.attention": ("attn_implementation",),
        "model.flash_attention": ("flash_attention",),
        "adapter.rank": ("lora_r",),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("peft_use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target_modules",),
        "adapter.target_all_linear": ("lora_target_linear",),
        "adapter.save_modules": ("lora_modules_to_save",),
        "adapter.init": ("peft_init_lora_weights", "init_lora_weights"),
        "adapter.loftq": ("loftq_bits",),
        "adapter.dora": ("peft_use_dora",),
        "adapter.bias": ("lora_bias",),
        "adapter.kernel_mlp": ("lora_mlp_kernel",),
        "adapter.kernel_qkv": ("lora_qkv_kernel",),
        "adapter.kernel_o": ("lora_o_kernel",),
        "quant.load_4bit": ("load_in_4bit",),
        "quant.load_8bit": ("load_in_8bit",),
        "quant.type_4bit": ("bnb_4bit_quant_type",),
        "quant.double": ("bnb_4bit_use_double_quant",),
        "quant.compute_dtype": ("bnb_4bit_compute_dtype",),
        "optim.lr": ("learning_rate",),
        "optim.name": ("optimizer",),
        "optim.scheduler": ("lr_scheduler",),
        "optim.warmup_ratio": ("warmup_ratio",),
        "optim.warmup_steps": ("warmup_steps",),
        "optim.epochs": ("num_epochs",),
        "optim.max_steps": ("max_steps",),
        "optim.weight_decay": ("weight_decay",),
        "optim.grad_clip": ("max_grad_norm",),
        "optim.embedding_lr": ("embedding_lr",),
        "batch.per_device": ("micro_batch_size",),
        "batch.accumulation": ("gradient_accumulation_steps",),
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("sequence_len",),
        "data.packing": ("sample_packing",),
        # axolotl 0.19.0 loaders/tokenizer.py load_tokenizer: `tokens` go to add_tokens and
        # `special_tokens` (bos/eos/unk/pad, additional_special_tokens) to add_special_tokens: a
        # token the vocabulary lacks becomes a new embedding row. `chat_template` (a name, or
        # `jinja` with `chat_template_jinja`) only sets the template string: its markers are
        # tokenised into pieces the model has, unless `tokens:` / `special_tokens:` add them.
        "data.new_tokens": ("tokens",),
        "data.special_tokens": ("=special_tokens",),  # a mapping: read at the root
        "adapter.unfrozen": ("unfrozen_parameters",),
        "adapter.trainable_tokens": ("peft_trainable_token_indices",),
        "data.eval": ("val_set_size", "test_datasets"),
        "cadence.eval_strategy": ("eval_strategy",),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.evals_per_epoch": ("evals_per_epoch",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.saves_per_epoch": ("saves_per_epoch",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.gradient_checkpointing": ("gradient_checkpointing",),
        "runtime.deepspeed": ("deepspeed",),
        "runtime.fsdp": ("fsdp_config",),
        "export.merge": ("merge_lora",),
        **_RULE_FIELDS_AXOLOTL,
    },
    signature={
        "base_model": 2, "adapter": 2, "micro_batch_size": 3, "num_epochs": 2, "sequence_len": 3,
        "lora_target_linear": 3, "sample_packing": 3, "val_set_size": 2, "dataset_prepared_path": 3,
        "lora_r": 1, "lora_alpha": 1, "lora_model_dir": 3, "lr_scheduler": 1, "evals_per_epoch": 3,
        "saves_per_epoch": 3, "wandb_project": 1, "special_tokens": 1, "datasets": 1,
        "load_in_4bit": 1, "pad_to_sequence_len": 2, "eval_sample_packing": 3, "tokenizer_type": 1,
    },
    min_score=5,
)

LLAMA_FACTORY = Layout(
    name="llama-factory",
    defaults_table="llama-factory",  # defaults.DEFAULTS
    key_table="llama-factory",  # the runner's own key list (knowledge/runner_keys.json)
    title="LLaMA-Factory-style arguments (finetuning_type, lora_rank, lora_target, cutoff_len)",
    # the file goes to transformers' HfArgumentParser.parse_dict after yaml.safe_load: text stays text
    default_method="lora",  # FinetuningArguments.finetuning_type defaults to "lora"
    eval_data_known=True,
    # max_samples truncates each listed dataset to that many rows (LLaMA-Factory data/loader.py)
    rows_cap_key="max_samples",
    trainer_defaults=True,  # the file is parsed into (a subclass of) TrainingArguments
    trainer_schedule=True,
    word_lists=frozenset({"transformers-arguments", "transformers-strategies"}),
    targets_text="comma-list",  # lora_target: "q_proj,v_proj" is split on commas
    # add_tokens / add_special_tokens / additional_target: comma texts (hparams __post_init__)
    comma_token_lists=True,
    # model/patcher.py patch_tokenizer turns resize_vocab on when add_tokens / add_special_tokens
    # add any token; model/adapter.py adds the input and output embeddings to additional_target
    # when resize_vocab is on and additional_target is unset; a template's stop words only warn
    # "make sure `resize_vocab` is True" (data/template.py), and patcher.py resizes only with it
    vocab_resize_key="resize_vocab",
    # data/template.py (0.9.5) register_template stop_words, added as special tokens by
    # fix_special_tokens (replace_eos: the first becomes the EOS token); the text-marker templates
    # (llama2, mistral, alpaca, vicuna, zephyr, default, empty) register none
    template_stop_words={"chatml": ("<|im_end|>", "<|im_start|>"), "qwen": ("<|im_end|>",),
                         "qwen3": ("<|im_end|>",), "phi4": ("<|im_end|>",),
                         "llama3": ("<|eot_id|>", "<|eom_id|>"), "gemma": ("<end_of_turn>",),
                         "phi": ("<|end|>",)},
    # fp16_mode stays "autocast": model/adapter.py _setup_full_tuning casts the trainable
    # parameters to fp32 (cast_trainable_params_to_fp32, off only with pure_bf16)
    fields={
        "method": ("finetuning_type",),
        "model.ref": ("model_name_or_path",),
        "model.attention": ("flash_attn",),
        "adapter.rank": ("lora_rank",),
        "adapter.alpha": ("lora_alpha",),
        "adapter.rslora": ("use_rslora",),
        "adapter.dropout": ("lora_dropout",),
        "adapter.targets": ("lora_target",),
        "adapter.save_modules": ("additional_target",),
        # LLaMA-Factory 0.9.5 hparams/model_args.py: add_tokens / add_special_tokens (comma
        # texts; new_special_tokens before 0.9.4), resize_vocab; data_args.template names a
        # registered template whose stop words data/template.py fix_special_tokens adds
        "data.new_tokens": ("add_tokens", "add_special_tokens", "new_special_tokens"),
        "data.template_name": ("template",),
        "model.resize_vocab": ("resize_vocab",),
        "adapter.dora": ("use_dora",),
        "adapter.init": ("pissa_init",),
        "quant.bits": ("quantization_bit",),
        "quant.type_4bit": ("quantization_type",),
        "quant.double": ("double_quantization",),
        "optim.lr": ("learning_rate",),
        "optim.name": ("optim",),
        "optim.scheduler": ("lr_scheduler_type",),
        "optim.warmup_ratio": ("warmup_ratio",),
        "optim.warmup_steps": ("warmup_steps",),
        "optim.epochs": ("num_train_epochs",),
        "optim.max_steps": ("max_steps",),
        "optim.weight_decay": ("weight_decay",),
        "optim.grad_clip": ("max_grad_norm",),
        "batch.per_device": ("per_device_train_batch_size",),
        "batch.accumulation": ("gradient_accumulation_steps",),
        "precision.bf16": ("bf16",),
        "precision.fp16": ("fp16",),
        "precision.tf32": ("tf32",),
        "data.seq_len": ("cutoff_len",),
        "data.packing": ("packing",),
        "data.eval": ("eval_dataset", "val_size"),
        # max_samples caps each dataset, not the total: not a row count
        "cadence.eval_strategy": ("eval_strategy",),
        "cadence.eval_steps": ("eval_steps",),
        "cadence.save_strategy": ("save_strategy",),
        "cadence.save_steps": ("save_steps",),
        "cadence.logging_steps": ("logging_steps",),
        "cadence.load_best": ("load_best_model_at_end",),
        "runtime.deepspeed": ("deepspeed",),
        "export.merge": ("export_dir",),
    },
    signature={
        # the keys it shares with the trainer layout score there; these are its own
        "finetuning_type": 6, "stage": 3, "cutoff_len": 4, "lora_target": 4, "template": 3,
        "quantization_bit": 3, "lora_rank": 2, "do_train": 1, "max_samples": 2, "plot_loss": 4,
        "preprocessing_num_workers": 1, "overwrite_cache": 2, "quantization_method": 2, "ddp_timeout": 1,
    },
    min_score=5,
    # keys only LLaMA-Factory's argument classes declare (hparams/finetuning_args.py, data_args.py)
    extends="trainer",
    extends_marks=frozenset("finetuning_type stage template cutoff_len lora_target quantization_bit plot_loss".split()),
)

LLAMA_FACTORY_V1 = Layout(
    name="llama-factory-v1",
    defaults_table="llama-factory-v1",  # defaults.DEFAULTS
    key_table="llama-factory-v1",  # its own closed argument set (knowledge/runner_keys.json)
    title="LLaMA-Factory v1 arguments (model, peft_config block, micro_batch_size, cutoff_len)",
    default_method="full",  # no peft_config block: every weight trains
    trainer_schedule=True,
    targets_text="comma-list",
    fields={
        "method": ("=peft_config.name",),
        "model.ref": ("=model",),
        "adapter.rank": ("=peft_config.r",),
        "adapter.alpha": ("=peft_config.lora_alpha",),
        "adapter.dropout": ("=peft_config.lora_dropout",),
        "adapter.targets": ("=peft_config.target_modules",),
        "optim.lr": ("=learning_rate",),
        "optim.max_steps": ("=max_steps",),
        "optim.epochs": ("=num_train_epochs",),
        # v1 TrainingArguments (llamafactory 0.9.5 v1/config/training_args.py) has micro_batch_size
        # and global_batch_size ("default to DP size * micro batch size"), no accumulation key
        "batch.per_device": ("=micro_batch_size",),
        "batch.global": ("=global_batch_size",),
        "data.seq_len": ("=cutoff_len",),
        "precision.bf16": ("=bf16",),
        "optim.grad_clip": ("=max_grad_norm",),
        "cadence.save_steps": ("=save_steps",),
        "cadence.logging_steps": ("=logging_steps",),
        "runtime.gradient_checkpointing": ("=enable_activation_checkpointing",),
    },
    # its own keys weigh more than the trainer names a peft_config block spells (r, lora_alpha,
    # lora_dropout, target_modules), which are no trainer settings here
    signature={"model_class": 8, "kernel_config": 6, "dist_config": 4, "sample_backend": 6,
               "train_dataset": 1, "peft_config": 1, "cutoff_len": 1, "micro_batch_size": 1,
               "quant_config": 4},
    min_score=6,
)

TORCHTUNE = Layout(
    name="torchtune",
    key_table="torchtune",  # the runner's own key list (knowledge/runner_keys.json)
    title="component-style recipe (_component_ keys, model builder, lora_rank, optimizer.lr)",
    # torchtune loads recipes with OmegaConf.load, whose YAML loader adds an implicit float
    # resolver that accepts a mantissa without a dot and an exponent without a sign
    # (omegaconf 2.3.0 _utils.py get_yaml_loader: `[-+]?[0-9]+(?:_[0-9]+)*(?:[eE][-+]?[0-9]+)`).
    coerces_numbers=True,
    number_reader="the recipe is loaded by OmegaConf, whose YAML reader takes it as a float",
    interpolates=True,
    default_method="full",
    # torchtune builds a block-causal mask for packed samples (datasets/_packed.py)
    packing_masks_boundaries=True,
    # its recipes raise "full fp16 training is not supported with this recipe. Please use bf16
    # or fp32 instead." (recipes/full_finetune_*.py, lora_finetune_*.py)
    fp16_mode="refused",
    method_patterns=((r"(^|\.)qlora_", "qlora"), (r"(^|\.)lora_", "lora")),
    # torchtune 0.6.1 models/*/_model_builders.py: each builder's shapes are those of this model
    # (llama2_7b: 32 layers, 4096 wide, max_seq_len 4096; qwen2_5_*_instruct: max_seq_len 32768)
    builder_models=(
        (r"llama2_7b$", "meta-llama/Llama-2-7b-hf"), (r"llama2_13b$", "meta-llama/Llama-2-13b-hf"),
        (r"llama2_70b$", "meta-llama/Llama-2-70b-hf"),
        # models/code_llama2/_model_builders.py: max_seq_len 16384
        (r"code_llama2_7b$", "codellama/CodeLlama-7b-hf"), (r"code_llama2_13b$", "codellama/CodeLlama-13b-hf"),
        (r"code_llama2_70b$", "codellama/CodeLlama-70b-hf"),
        (r"llama3_8b$", "meta-llama/Meta-Llama-3-8B"), (r"llama3_70b$", "meta-llama/Meta-Llama-3-70B"),
        (r"llama3_1_8b$", "meta-llama/Llama-3.1-8B"), (r"llama3_1_70b$", "meta-llama/Llama-3.1-70B"),
        (r"llama3_1_405b$", "meta-llama/Llama-3.1-405B"),
        (r"llama3_2_1b$", "meta-llama/Llama-3.2-1B"), (r"llama3_2_3b$", "meta-llama/Llama-3.2-3B"),
        (r"llama3_3_70b$", "meta-llama/Llama-3.3-70B-Instruct"),
        (r"mistral_7b$", "mistralai/Mistral-7B-v0.1"),
        (r"gemma_2b$", "google/gemma-2b"), (r"gemma_7b$", "google/gemma-7b"),
        (r"gemma2_2b$", "google/gemma-2-2b"), (r"gemma2_9b$", "google/gemma-2-9b"),
        (r"gemma2_27b$", "google/gemma-2-27b"),
        (r"phi3_mini$", "microsoft/Phi-3-mini-4k-instruct"), (r"phi4_14b$", "microsoft/phi-4"),
        (r"qwen2_5_0_5b$", "Qwen/Qwen2.5-0.5B"),
        (r"qwen2_5_1_5b_base$", "Qwen/Qwen2.5-1.5B"), (r"qwen2_5_1_5b_instruct$", "Qwen/Qwen2.5-1.5B-Instruct"),
        (r"qwen2_5_3b$", "Qwen/Qwen2.5-3B"),
        (r"qwen2_5_7b_base$", "Qwen/Qwen2.5-7B"), (r"qwen2_5_7b_instruct$", "Qwen/Qwen2.5-7B-Instruct"),
        (r"qwen2_5_14b_base$", "Qwen/Qwen2.5-14B"), (r"qwen2_5_14b_instruct$", "Qwen/Qwen2.5-14B-Instruct"),
        (r"qwen2_5_32b_base$", "Qwen/Qwen2.5-32B"), (r"qwen2_5_32b_instruct$", "Qwen/Qwen2.5-32B-Instruct"),
        (r"qwen2_5_72b_base$", "Qwen/Qwen2.5-72B"), (r"qwen2_5_72b_instruct$", "Qwen/Qwen2.5-72B-Instruct"),
        (r"qwen2_0_5b$", "Qwen/Qwen2-0.5B"), (r"qwen2_1_5b$", "Qwen/Qwen2-1.5B"), (r"qwen2_7b$", "Qwen/Qwen2-7B"),
        # models/qwen3/_model_builders.py (torchtune main): 0.6B-14B base and instruct, 32B
        (r"qwen3_0_6b_(base|instruct)$", "Qwen/Qwen3-0.6B"), (r"qwen3_1_7b_(base|instruct)$", "Qwen/Qwen3-1.7B"),
        (r"qwen3_4b_(base|instruct)$", "Qwen/Qwen3-4B"), (r"qwen3_8b_(base|instruct)$", "Qwen/Qwen3-8B"),
        (r"qwen3_14b_(base|instruct)$", "Qwen/Qwen3-14B"), (r"qwen3_32b$", "Qwen/Qwen3-32B"),
    ),
    model_dir="checkpointer.checkpoint_dir",
    module_names={"q_proj": "q_proj", "k_proj": "k_proj", "v_proj": "v_proj",
                  "output_proj": "o_proj"},
    fields={
        "model.builder": ("=model._component_",),
        "model.dtype": ("=dtype",),
        "adapter.rank": ("=model.lora_rank",),
        "adapter.alpha": ("=model.lora_alpha",),
        "adapter.dropout": ("=model.lora_dropout",),
        "adapter.targets": ("=model.lora_attn_modules",),
        "adapter.mlp": ("=model.apply_lora_to_mlp",),
        "adapter.output": ("=model.apply_lora_to_output",),
        "adapter.dora": ("=model.use_dora",),
        "optim.lr": ("=optimizer.lr",),
        "optim.name": ("=optimizer._component_",),
        "optim.scheduler": ("=lr_scheduler._component_",),
        "optim.warmup_steps": ("=lr_scheduler.num_warmup_steps",),
        "optim.weight_decay": ("=optimizer.weight_decay",),
        "optim.epochs": ("=epochs",),
        "optim.grad_clip": ("=clip_grad_norm",),
        "batch.per_device": ("=batch_size",),
        "batch.accumulation": ("=gradient_accumulation_steps",),
        "data.seq_len": ("=tokenizer.max_seq_len",),
        "data.packing": ("=dataset.packed",),
        "cadence.logging_steps": ("=log_every_n_steps",),
        "runtime.gradient_checkpointing": ("=enable_activation_checkpointing",),
    },
    signature={
        "_component_": 3, "checkpointer": 3, "enable_activation_checkpointing": 3,
        "max_steps_per_epoch": 3, "log_every_n_steps": 2, "metric_logger": 2, "epochs": 1,
        "batch_size": 1, "dtype": 1, "recipe_checkpoint": 2, "compile": 1, "loss": 1,
    },
    sections={"model": (), "optimizer": (), "tokenizer": (), "checkpointer": (), "dataset": (),
              "lr_scheduler": (), "loss": (), "metric_logger": (), "profiler": ()},
    min_score=6,
)

MLX_LM = Layout(
    name="mlx-lm",
    title="MLX LM fine-tuning config (fine_tune_type, lora_parameters, iters, batch_size)",
    # mlx-lm 0.32.2 mlx_lm/lora.py: the file is read with yaml.SafeLoader plus an implicit float
    # resolver that takes a mantissa without a dot (`1e-5`) as a float
    coerces_numbers=True,
    number_reader="mlx-lm reads the config with a YAML loader that adds a float resolver, which takes it as a float",
    loader_reads_numbers=True,
    # lora.py CONFIG_DEFAULTS fine_tune_type "lora"; train_model: "lora" and "dora" put adapters on
    # the last num_layers blocks, "full" unfreezes only the last num_layers blocks (16 unless -1)
    default_method="lora",
    method_values={"lora": "lora", "dora": "lora", "full": "partial"},
    fields={
        "model.ref": ("=model",),
        "method": ("=fine_tune_type",),
        "adapter.rank": ("=lora_parameters.rank",),
        "adapter.dropout": ("=lora_parameters.dropout",),
        "optim.name": ("=optimizer",),
        # the rate when no lr_schedule is written (an lr_schedule's arguments[0] replaces it)
        "optim.lr": ("=learning_rate",),
        "batch.per_device": ("=batch_size",),
        "batch.accumulation": ("=grad_accumulation_steps",),
        "data.seq_len": ("=max_seq_length",),
        "runtime.gradient_checkpointing": ("=grad_checkpoint",),
    },
    # mlx-lm 0.32.2 mlx_lm/lora.py CONFIG_DEFAULTS, filled in for every key the file leaves out
    defaults=(
        ("batch.per_device", 4, "batch_size defaults to 4 (mlx-lm 0.32.2 lora.py CONFIG_DEFAULTS)"),
        ("batch.accumulation", 1, "grad_accumulation_steps defaults to 1 (mlx-lm 0.32.2 lora.py CONFIG_DEFAULTS)"),
        ("data.seq_len", 2048, "max_seq_length defaults to 2048 (mlx-lm 0.32.2 lora.py CONFIG_DEFAULTS)"),
        ("runtime.gradient_checkpointing", False,
         "grad_checkpoint defaults to false (mlx-lm 0.32.2 lora.py CONFIG_DEFAULTS)"),
    ),
    reads="the top-level keys of mlx_lm.lora's config and lora_parameters' rank and dropout",
    not_read="lr_schedule (its first argument replaces learning_rate); iters, steps_per_eval and "
             "save_every (they count micro-batches, and validation also runs on the first and last "
             "iteration); lora_parameters.scale (the LoRA scale itself, not an alpha) and keys",
    signature={
        "fine_tune_type": 4, "lora_parameters": 4, "iters": 3, "steps_per_eval": 3,
        "steps_per_report": 3, "val_batches": 3, "grad_checkpoint": 3, "resume_adapter_file": 3,
        "adapter_path": 2, "save_every": 2, "test_batches": 2, "lr_schedule": 2, "mask_prompt": 2,
        "num_layers": 1,
    },
    min_score=6,
)

ACCELERATE = Layout(
    name="accelerate",
    title="accelerate launch config (distributed_type, num_processes, mixed_precision)",
    role="launch",
    word_lists=frozenset({"accelerate"}),
    key_table="accelerate",
    fields={
        "runtime.distributed": ("=distributed_type",),
        # accelerate's num_processes counts processes over all machines
        "hardware.num_gpus": ("=num_processes",),
        "launch.num_machines": ("=num_machines",),
        "precision.mixed": ("=mixed_precision",),
        "runtime.deepspeed": ("=deepspeed_config.deepspeed_config_file",),
        "runtime.zero_stage": ("=deepspeed_config.zero_stage",),
        "batch.accumulation": ("=deepspeed_config.gradient_accumulation_steps",),
        "optim.grad_clip": ("=deepspeed_config.gradient_clipping",),
        "runtime.fsdp": ("=fsdp_config",),
        "runtime.gradient_checkpointing": ("=fsdp_config.fsdp_activation_checkpointing",),
        **_RULE_FIELDS_ACCELERATE,
    },
    signature={
        "compute_environment": 3, "distributed_type": 3, "num_processes": 2, "num_machines": 2,
        "machine_rank": 2, "main_training_function": 3, "mixed_precision": 1, "deepspeed_config": 2,
        "fsdp_config": 2, "rdzv_backend": 2, "downcast_bf16": 3, "same_network": 2, "use_cpu": 1,
        "tpu_env": 2, "main_process_ip": 2, "main_process_port": 2, "gpu_ids": 2,
    },
    min_score=3,
)

PEFT_BENCH = Layout(
    name="peft-bench",
    defaults_table="peft-bench",  # defaults.DEFAULTS
    title="PEFT method-comparison training parameters (defaults and per-experiment overrides)",
    # PEFT method_comparison/MetaMathQA: run.py takes ./experiments/<peft-method>/<experiment-name>;
    # utils.py get_train_config reads the default params, then {**default, **experiment}; main():
    # "Could not find PEFT config at {path}, performing FULL FINETUNING" without adapter_config.json
    experiment_root="experiments",
    experiment_defaults=("default_training_params.json", "experiments/default_training_params.json"),
    experiment_adapter="adapter_config.json",
    reads="an experiment's training_params.json over the default training params (top-level keys replace); "
          "the method from the adapter_config.json beside it (none: full fine-tuning)",
    fields={
        "model.ref": ("=model_id",),
        "model.dtype": ("=dtype",),
        "model.attention": ("=attn_implementation",),
        "optim.lr": ("=optimizer_kwargs.lr",),
        "optim.weight_decay": ("=optimizer_kwargs.weight_decay",),
        "optim.name": ("=optimizer_type",),
        "optim.scheduler": ("=lr_scheduler",),
        "optim.max_steps": ("=max_steps",),
        "optim.grad_clip": ("=grad_norm_clip",),
        "batch.per_device": ("=batch_size",),
        "data.seq_len": ("=max_seq_length",),
        "cadence.eval_steps": ("=eval_steps",),
        "runtime.gradient_checkpointing": ("=use_gc",),
    },
    signature={
        "optimizer_kwargs": 3, "optimizer_type": 2, "batch_size_eval": 2, "use_amp": 2,
        "grad_norm_clip": 2, "autocast_adapter_dtype": 3, "use_gc": 2, "query_template": 2,
        "init_kv_cache_prefix": 3, "generation_kwargs": 1,
    },
    min_score=3,
)

# Order matters only for ties: the most specific layouts first.
LAYOUTS: tuple[Layout, ...] = (PEFT_ADAPTER, DEEPSPEED, ACCELERATE, PEFT_BENCH, TORCHTUNE, MLX_LM,
                               LLAMA_FACTORY_V1, LLAMA_FACTORY, AXOLOTL, TRAINER)
BY_NAME = MappingProxyType({lay.name: lay for lay in LAYOUTS})

# Words that say a file is something other than a training config (counted as skipped).
NOT_TRAINING = MappingProxyType({
    "github-workflow": {"jobs", "runs-on", "steps"},
    "compose": {"services", "volumes", "networks"},
    "pre-commit": {"repos"},
    "kubernetes": {"apiVersion", "kind", "metadata", "spec"},
    # a W&B run's recorded config (wandb/run-*/files/config.yaml: each value as {desc, value})
    "wandb-run-record": {"wandb_version", "_wandb"},
    # transformers Trainer's trainer_state.json in a checkpoint folder (TrainerState.save_to_json)
    "trainer-state": {"log_history", "global_step", "best_metric", "best_model_checkpoint",
                      "is_world_process_zero", "is_local_process_zero", "total_flos"},
})


# ---------------------------------------------------------------------------------------------
# Formats cfgcheck recognises but does not read: named in the summary, never read as a layout.

class UnreadFormat:
    name: str
    title: str
    # top-level keys that mark it (``-`` and ``_`` are the same), how many must be present, and
    # keys of which at least one must be there (empty: none required)
    marks: frozenset[str]
    min_hits: int
    required: frozenset[str]
    # keys of a top-level section that mark it ("trainer" -> Lightning's trainer arguments)
    section: str
    # a special shape: "composed" (a defaults: list or _target_ nodes), "tuning-space" (lists of
    # candidate values where DeepSpeed takes one value), "class-path" (class_path / init_args)
    shape: str

    __slots__ = ('name', 'title', 'marks', 'min_hits', 'required', 'section', 'shape')

    def __init__(self, name, title, marks=frozenset(), min_hits=2, required=frozenset(), section="", shape=""):
        _setattr(self, 'name', name)
        _setattr(self, 'title', title)
        _setattr(self, 'marks', marks)
        _setattr(self, 'min_hits', min_hits)
        _setattr(self, 'required', required)
        _setattr(self, 'section', section)
        _setattr(self, 'shape', shape)

    @guarded_repr
    def __repr__(self):
        return f"{type(self).__qualname__}(name={self.name!r}, title={self.title!r}, marks={self.marks!r}, min_hits={self.min_hits!r}, required={self.required!r}, section={self.section!r}, shape={self.shape!r})"

    def __eq__(self, other):
        if other.__class__ is self.__class__:
            return (self.name, self.title, self.marks, self.min_hits, self.required, self.section, self.shape) == (other.name, other.title, other.marks, other.min_hits, other.required, other.section, other.shape)
        return NotImplemented

    def __hash__(self):
        return hash((self.name, self.title, self.marks, self.min_hits, self.required, self.section, self.shape))

    __setattr__ = _frozen_setattr
    __delattr__ = _frozen_delattr

    def __getstate__(self):
        return (self.name, self.title, self.marks, self.min_hits, self.required, self.section, self.shape)

    __setstate__ = _frozen_setstate


# keys that name a base file the config is composed over (compose.py reads them)
BASE_FILE_KEYS = ("_base_", "base_config", "extends", "inherit_from", "base")

UNREAD_FORMATS: tuple[UnreadFormat, ...] = (
    UnreadFormat(
        name="megatron-lm", title="a Megatron-LM YAML config (language_model, model_parallel sections)",
        # Megatron-LM --yaml-cfg files: TransformerConfig and ModelParallelConfig as two sections
        marks=frozenset("language_model model_parallel use_legacy_models transformer_impl spec "
                        "lr_decay_style lr_warmup_fraction train_iters train_samples".split()),
        min_hits=3, required=frozenset({"language_model", "model_parallel", "use_legacy_models"}),
    ),
    UnreadFormat(
        name="gpt-neox", title="a GPT-NeoX model and training config",
        # GPT-NeoX configs/*.yml (neox_arguments): hyphenated or underscored names
        marks=frozenset("pipe_parallel_size model_parallel_size num_layers hidden_size num_attention_heads "
                        "data_impl checkpoint_factor "
                        "seq_length max_position_embeddings pos_emb norm train_iters lr_decay_style "
                        "lr_decay_iters vocab_file merge_file data_path checkpoint_activations "
                        "partition_activations synchronize_each_layer gpt_j_residual "
                        "scaled_upper_triang_masked_softmax_fusion bias_gelu_fusion output_layer_parallelism "
                        "attention_config init_method output_layer_init_method".split()),
        min_hits=3,
        required=frozenset("pipe_parallel_size model_parallel_size pos_emb train_iters lr_decay_style "
                           "gpt_j_residual attention_config output_layer_parallelism merge_file data_impl "
                           "checkpoint_factor".split()),
    ),
    UnreadFormat(
        name="deepspeed-autotuning", title="a DeepSpeed autotuning tuning space (lists of candidate values)",
        shape="tuning-space",
    ),
    UnreadFormat(
        name="composed", title="a config composed from other files that cannot be put together "
                               "(a defaults: list or base file not found, or _target_ nodes)",
        shape="composed",
    ),
    UnreadFormat(
        name="lightning", title="a PyTorch Lightning / NeMo-style config (trainer: accelerator, devices, max_epochs)",
        marks=frozenset("accelerator devices max_epochs accumulate_grad_batches strategy num_nodes "
                        "gradient_clip_val val_check_interval check_val_every_n_epoch limit_val_batches "
                        "enable_checkpointing".split()),
        min_hits=3, section="trainer",
    ),
    UnreadFormat(
        name="llm-foundry", title="an llm-foundry / Composer-style config (global_train_batch_size, max_duration)",
        marks=frozenset("global_train_batch_size device_train_microbatch_size max_duration eval_interval "
                        "device_eval_batch_size eval_first save_interval".split()),
        min_hits=2,
        # Composer's own names (eval_interval / save_interval alone are common research-script keys)
        required=frozenset("global_train_batch_size device_train_microbatch_size max_duration".split()),
    ),
    UnreadFormat(
        name="class-path", title="a LitGPT / LightningCLI-style config (class_path with init_args)",
        # jsonargparse: a mapping {class_path: a.b.Class, init_args: {...}} names the class that
        # is built with those arguments (LitGPT config_hub, LightningCLI configs)
        shape="class-path",
    ),
    UnreadFormat(
        name="rl-trainer-sections", title="a verl-style RL trainer config (actor_rollout_ref, critic, algorithm)",
        marks=frozenset("actor_rollout_ref critic algorithm reward_model trainer data custom_reward_function".split()),
        min_hits=3, required=frozenset({"actor_rollout_ref"}),
    ),
    UnreadFormat(
        name="h2o-llmstudio", title="an H2O LLM Studio experiment config (llm_backbone, problem_type, sections)",
        marks=frozenset("llm_backbone problem_type experiment_name output_directory architecture augmentation "
                        "environment prediction dataset tokenizer training logging".split()),
        min_hits=5, required=frozenset({"llm_backbone", "problem_type"}),
    ),
    UnreadFormat(
        name="levanter", title="a Levanter-style config (trainer: mp, num_train_steps, steps_per_eval)",
        # Levanter's TrainerConfig (draccus): mixed-precision policy, step counts, mesh axes
        marks=frozenset("mp num_train_steps steps_per_eval tracker fsdp_axis batch_axis tensor_parallel_axes "
                        "per_device_parallelism per_device_eval_parallelism checkpointer".split()),
        min_hits=3, section="trainer",
    ),
    UnreadFormat(
        name="ludwig", title="a Ludwig config (input_features, output_features)",
        marks=frozenset("input_features output_features model_type".split()), min_hits=2,
        required=frozenset({"input_features"}),
    ),
)


# ---------------------------------------------------------------------------------------------
# The layouts table (docs/layouts-and-rules.md and ``cfgcheck describe LAYOUT``), generated from
# the tables above so it cannot drift from what is read.

def _grouped(names) -> str:
    groups: dict[str, list[str]] = {}
    for n in sorted(names):
        head, _, tail = n.partition(".")
        groups.setdefault(head, []).append(tail or head)
    return "; ".join(f"{h}: {', '.join(t)}" if t != [h] else h for h, t in groups.items())


def layout_summary(layout: Layout) -> dict[str, str]:
    """What a layout reads and does not read, in words (generated from its table)."""
    read = set(layout.fields)
    extra = ""
    if layout.builder_models or layout.model_dir:
        read.add("model.ref")
        extra = f"; model.ref from the builder's name, else `{layout.model_dir}` (its config.json)"
    if layout.method_patterns:
        read.add("method")
        extra += "; the method from the builder's name"
    if layout.default_method:
        extra += f"; no method written means {layout.default_method}"
    if layout.defaults:
        extra += "; unwritten: " + ", ".join(f"{name} {value}" for name, value, _ in layout.defaults)
    not_read = set(FIELD_TYPES) - read
    top = sorted(layout.signature, key=lambda k: (-layout.signature[k], k))[:6]
    where = "bare names at the top level and in its sections" if layout.has_bare_names else "exact key paths"
    if layout.search_all_sections:
        where = "bare names at the top level and in any section"
    return {
        "name": layout.name,
        "title": layout.title,
        "recognised": ", ".join(f"`{k}`" for k in top),
        "reads": _grouped(read) + f" ({where})" + extra + (f"; {layout.reads}" if layout.reads else ""),
        "not_read": _grouped(not_read) + (f"; {layout.not_read}" if layout.not_read else ""),
        "sections": ", ".join(f"`{s}`" for s in sorted(layout.sections)) or "none",
    }


def layouts_markdown() -> str:
    """The docs' layouts table: one row per layout, then the formats recognised but not read."""
    lines = ["| layout | recognised by | view fields read | view fields not read |",
             "| --- | --- | --- | --- |"]
    for lay in LAYOUTS:
        s = layout_summary(lay)
        cells = [f"`{s['name']}`: {s['title']}", s["recognised"], s["reads"], s["not_read"]]
        lines.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
    lines += ["", "Recognised but not read (named in the summary as \"not a format cfgcheck reads (yet)\"):", ""]
    for fmt in UNREAD_FORMATS:
        marks = ", ".join(f"`{m}`" for m in sorted(fmt.required or fmt.marks)[:6])
        how = {"composed": "a top-level `defaults:` list, or `_target_` nodes",
               "class-path": "a mapping with `class_path` and `init_args`",
               "tuning-space": "a list where DeepSpeed takes one value (`zero_optimization.stage`, "
                               "`train_micro_batch_size_per_gpu`)"}.get(fmt.shape, marks)
        where = f" in `{fmt.section}:`" if fmt.section else ""
        lines.append(f"* `{fmt.name}`: {fmt.title}; recognised by {how}{where}")
    return "\n".join(lines) + "\n"


def keys_read(layout: Layout) -> frozenset[str]:
    """The keys this layout's field specs read: bare names, and dotted root paths ("a.b")."""
    return frozenset(spec[1:] if spec.startswith("=") else spec
                     for specs in layout.fields.values() for spec in specs)
