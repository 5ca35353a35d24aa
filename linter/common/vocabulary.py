"""The concepts trimtab reasons about, each declared once, and the built-in alias table.

Rules speak only in concepts. A file's keys reach a concept through the user's key map, through
the alias table below (generic words of the trade, matched on the leaf key with its parent
sections as context), or through the native layout (the concept's own dotted name).
"""
from __future__ import annotations

import re
from functools import lru_cache
from reprlib import recursive_repr

from .record import FrozenRecord, frozen_delattr, frozen_setattr


class Concept(FrozenRecord):
    name: str
    type: str  # int, number, bool, str, list, any
    unit: str
    meaning: str
    per: str  # "prompt" or "completion" for batch quantities
    scope: str  # "global" or "gpu" for batch quantities
    values: tuple  # allowed values of an enumeration, lower case
    share: bool  # an interval in steps where a value below 1 is a share of the run's total steps

    def __init__(
            self, name: str, type: str, unit: str = "", meaning: str = "", per: str = "", scope: str = "",
            values: tuple = (), share: bool = False
    ) -> None:
        object.__setattr__(self, "name", name)
        object.__setattr__(self, "type", type)
        object.__setattr__(self, "unit", unit)
        object.__setattr__(self, "meaning", meaning)
        object.__setattr__(self, "per", per)
        object.__setattr__(self, "scope", scope)
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "share", share)

    # repr, equality and hash (common/record.py)
    _fields = (
        "name", "type", "unit", "meaning", "per", "scope", "values", "share",
    )


_C = Concept
CONCEPTS: dict[str, Concept] = {c.name: c for c in (
    _C("run.estimator", "str", "", "advantage estimator / algorithm family",
       values=("grpo", "ppo", "rloo", "reinforce", "reinforce++", "remax", "gae", "dr_grpo", "dapo")),
    _C("run.stage", "str", "", "what the config trains", values=("rl", "sft", "distill")),
    _C("run.seed", "int", "", "random seed"),
    _C("run.name", "str", "", "run identity"),
    _C("cluster.nodes", "int", "nodes", "machines in the job"),
    _C("cluster.gpus_per_node", "int", "GPUs", "GPUs on each machine"),
    _C("cluster.world_size", "int", "GPUs", "training GPUs in all"),
    _C("train.tensor_parallel", "int", "", "tensor-parallel degree of training"),
    _C("train.pipeline_parallel", "int", "", "pipeline-parallel degree of training"),
    _C("train.context_parallel", "int", "", "context-parallel degree of training"),
    _C("train.data_parallel", "int", "ranks", "data-parallel ranks: world / (tp x pp x cp)"),
    _C("rollout.tensor_parallel", "int", "", "tensor-parallel degree of the rollout engine"),
    _C("rollout.gpus", "int", "GPUs", "GPUs the rollout engine runs on (default: the world)"),
    _C("batch.prompts", "int", "prompts", "unique prompts per training step", per="prompt", scope="global"),
    _C("rollout.group_size", "int", "completions", "completions sampled per prompt"),
    _C("batch.rollouts", "int", "completions", "completions per training step", per="completion",
       scope="global"),
    _C("batch.mini", "int", "completions", "completions per optimiser update", per="completion",
       scope="global"),
    _C("batch.micro_per_gpu", "int", "completions", "completions per forward/backward on one GPU",
       per="completion", scope="gpu"),
    _C("batch.grad_accum", "int", "", "micro-batches accumulated per optimiser update"),
    _C("optim.epochs", "int", "", "passes over each rollout batch"),
    _C("optim.updates_per_step", "int", "", "optimiser updates per step: rollouts / mini x epochs"),
    _C("rollout.temperature", "number", "", "sampling temperature"),
    _C("rollout.top_p", "number", "", "nucleus sampling mass"),
    _C("rollout.top_k", "int", "", "top-k sampling cut-off"),
    _C("rollout.sampling", "bool", "", "sampling on (false: greedy decoding)"),
    _C("length.prompt_max", "int", "tokens", "longest prompt"),
    _C("length.response_max", "int", "tokens", "longest response"),
    _C("rollout.context_max", "int", "tokens", "context window of the rollout engine"),
    _C("model.context_max", "int", "tokens", "context window of the model"),
    _C("kl.enabled", "bool", "", "KL regularisation switched on"),
    _C("kl.coef", "number", "", "KL coefficient (beta)"),
    _C("kl.estimator", "str", "", "KL estimator", values=("k1", "k2", "k3")),
    _C("kl.placement", "str", "", "where the KL term goes", values=("loss", "reward", "both", "none")),
    # not an enumeration: besides fixed and adaptive, trainers name controllers in their own words; only
    # "fixed" (and its synonyms in SWITCHES) is reasoned about
    _C("kl.controller", "str", "", "how the KL coefficient is set over the run (fixed, adaptive, ...)"),
    _C("kl.loss_enabled", "bool", "", "a KL term added to the loss switched on"),
    _C("kl.loss_coef", "number", "", "coefficient of the KL term in the loss"),
    _C("kl.reward_enabled", "bool", "", "a KL penalty subtracted from the reward switched on"),
    _C("kl.reward_coef", "number", "", "coefficient of the KL penalty in the reward"),
    _C("kl.target", "number", "", "target KL of an adaptive controller"),
    _C("kl.horizon", "int", "steps", "horizon of an adaptive KL controller"),
    _C("reference.source", "any", "", "reference policy weights (false/none: no reference)"),
    _C("reference.refresh_every", "int", "steps", "reference refresh interval"),
    _C("clip.low", "number", "", "ratio clip epsilon (lower, or both)"),
    _C("clip.high", "number", "", "upper ratio clip epsilon_high"),
    _C("clip.dual", "number", "", "dual-clip constant c"),
    _C("clip.value", "number", "", "value-function clip range"),
    _C("optim.lr", "number", "", "policy learning rate"),
    _C("optim.grad_clip", "number", "", "maximum gradient norm"),
    _C("optim.warmup_steps", "int", "steps", "learning-rate warm-up"),
    _C("schedule.total_steps", "int", "steps", "training steps in the run"),
    _C("critic.source", "any", "", "value model weights (false/none: no critic)"),
    _C("critic.lr", "number", "", "value model learning rate"),
    _C("gae.gamma", "number", "", "discount factor"),
    _C("gae.lambda", "number", "", "GAE lambda"),
    _C("reward.sources", "list", "", "reward components"),
    _C("reward.format_pattern", "str", "", "regular expression a well-formed answer matches"),
    _C("template.text", "str", "", "prompt template"),
    _C("sandbox.kind", "str", "", "where generated code runs",
       values=("none", "process", "container", "vm", "remote")),
    _C("sandbox.network", "bool", "", "network reachable from the sandbox"),
    _C("sandbox.timeout_s", "number", "seconds", "wall-clock limit per execution"),
    _C("sandbox.memory_mb", "number", "MB", "memory limit per execution"),
    _C("sandbox.processes", "int", "", "process limit per execution"),
    _C("sandbox.filesystem", "str", "", "host file system access",
       values=("none", "read-only", "readonly", "ro", "tmpfs", "writable", "rw", "read-write")),
    _C("sandbox.user", "str", "", "user the code runs as"),
    _C("sandbox.privileged", "bool", "", "privileged sandbox"),
    _C("model.source", "str", "", "policy weights"),
    _C("model.revision", "str", "", "pinned revision of the policy weights"),
    _C("model.trust_remote_code", "bool", "", "run code shipped with the weights"),
    _C("checkpoint.every", "int", "steps", "checkpoint interval (0 or false: off; below 1: a share of the run)",
       share=True),
    _C("checkpoint.dir", "str", "", "checkpoint directory"),
    _C("output.dir", "str", "", "output directory"),
)}

# Estimators that use no value model (a group, leave-one-out, greedy or batch baseline): the value
# model's settings are dead under them. Group-relative: arXiv:2402.03300; leave-one-out:
# arXiv:2402.14740 (from memory); greedy baseline: arXiv:2310.10505 (from memory); REINFORCE++:
# arXiv:2501.03262 (from memory).
CRITIC_FREE = frozenset({"grpo", "dr_grpo", "dapo", "rloo", "remax", "reinforce++"})


class Switch(FrozenRecord):
    """A concept whose value can turn a mechanism off. When it does, the concepts the mechanism
    governs are dead: written in the file but not read by the trainer. The resolver marks them once
    (``RunModel.dead``); rules do not reason about them and ``explain`` shows them as dead. A null
    value is never "off": it leaves the choice to the trainer."""

    concept: str
    governs: tuple
    off: tuple  # values that switch the mechanism off (text compared in lower case)

    def __init__(self, concept: str, governs: tuple, off: tuple = (False,)) -> None:
        object.__setattr__(self, "concept", concept)
        object.__setattr__(self, "governs", governs)
        object.__setattr__(self, "off", off)

    _fields = ("concept", "governs", "off")  # repr, equality and hash (common/record.py)


SWITCHES: tuple[Switch, ...] = (
    Switch("kl.enabled", ("kl.coef", "kl.estimator", "kl.controller", "kl.target", "kl.horizon")),
    Switch("kl.placement", ("kl.coef", "kl.estimator", "kl.controller", "kl.target", "kl.horizon"), off=("none",)),
    Switch("kl.loss_enabled", ("kl.loss_coef",)),
    Switch("kl.reward_enabled", ("kl.reward_coef",)),
    # a fixed coefficient has no controller: its target and horizon are not read (Ziegler et al. 2019,
    # arXiv:1909.08593, section 2.2, from memory: only the adaptive controller has them)
    Switch("kl.controller", ("kl.target", "kl.horizon"), off=("fixed", "constant", "static")),
    Switch("critic.source", ("critic.lr", "clip.value"), off=(False, "none", "off", "false", "disabled")),
    Switch("run.estimator", ("critic.lr", "clip.value"), off=tuple(sorted(CRITIC_FREE))),
    Switch("reference.source", ("reference.refresh_every",), off=(False, "none", "off", "false", "disabled")),
)


def switched_off(switch: Switch, value) -> bool:
    """Does ``value`` (a concept value as read) turn ``switch``'s mechanism off?"""
    if value is None:
        return False
    if isinstance(value, str):
        return value.strip().lower() in switch.off
    return any(value is o or (type(value) is type(o) and value == o) for o in switch.off)


# Keys that say where a KL term goes by their words (``kl`` with ``loss`` or ``reward``) and what they
# set by another word (a coefficient, or a switch): generic words of the trade, matched by word, not
# one trainer's spelling. KL in the reward vs in the loss: arXiv:2203.02155 (from memory) subtracts a
# per-token penalty from the reward; arXiv:2402.03300 adds the KL term to the loss.
_KL_PLACES = {"loss": "kl.loss", "reward": "kl.reward"}
_COEF_WORDS = frozenset({"coef", "coeff", "coefficient", "beta", "weight"})
_SWITCH_WORDS = frozenset({"use", "enable", "enabled", "apply"})
_FILLER = frozenset({"kl", "in", "to", "the", "as"})


# The concepts only word_concept reaches (a key map draft proposes them only for keys it reads so).
WORD_CONCEPTS = frozenset({"kl.loss_coef", "kl.loss_enabled", "kl.reward_coef", "kl.reward_enabled"})


def word_concept(leaf: str, parent: str = "") -> tuple[str, str] | None:
    """(concept, expected type) of a KL key known by its words, or None. ``leaf`` and ``parent``
    are normalised key words; the parent section's words count when the leaf names no KL
    (``kl_loss: {coef: ...}``)."""
    words = set(leaf.split("_"))
    if "kl" not in words:
        if not parent or "kl" not in parent.split("_"):
            return None
        words |= set(parent.split("_"))
    places = [p for p in _KL_PLACES if p in words]
    if len(places) != 1:
        return None
    rest = words - _FILLER - {places[0]}
    if rest and rest <= _COEF_WORDS:
        return _KL_PLACES[places[0]] + "_coef", "number"
    if rest <= _SWITCH_WORDS:
        return _KL_PLACES[places[0]] + "_enabled", "bool"
    return None


def section_word(name: str) -> str:
    """A section's normalised name as the alias table knows it: a section named by the words "kl"
    and a controller word (in any order or spelling) is the KL controller's section."""
    if "_" in name:
        words = set(name.split("_"))
        if "kl" in words and words & {"controller", "control", "ctrl"}:
            return "kl_controller"
    return name


# Fields of one reward component (reward.sources items).
def fits(value, expected: str) -> bool:
    """Does a value have a concept's type (int, number, bool, str; any other type takes anything but a
    date, which no concept means)?"""
    if expected == "int":
        return isinstance(value, int) and not isinstance(value, bool) or (
            isinstance(value, float) and value.is_integer())
    if expected == "number":
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if expected == "bool":
        return isinstance(value, bool)
    if expected == "str":
        return isinstance(value, str)
    return value is None or isinstance(value, (str, int, float, bool, list, dict))


def share_of_run(concept: str, value) -> bool:
    """Is ``value`` a share of the run's total steps: an interval concept (``share``) written as a
    number strictly between 0 and 1? A documented convention of the trade (common practice): an
    interval below 1 counts as that share of the total training steps."""
    c = CONCEPTS.get(concept)
    return (c is not None and c.share and isinstance(value, float) and 0 < value < 1)


def declare(concept: Concept) -> Concept:
    """Add a plugin's concept to the vocabulary (validated by the plugin registry)."""
    CONCEPTS.setdefault(concept.name, concept)
    return concept


REWARD_FIELDS = ("kind", "ref", "weight", "revision", "endpoint", "timeout_s", "name")
REWARD_KINDS = ("rule", "model", "judge", "code", "remote")

# Concepts whose presence marks a file as an RL run configuration.
RL_MARKERS = frozenset({
    "run.estimator", "rollout.group_size", "kl.coef", "kl.enabled", "kl.estimator", "clip.low",
    "clip.high", "reward.sources", "reference.source", "critic.source", "gae.lambda", "sandbox.kind",
    "rollout.temperature", "batch.rollouts", "batch.prompts", "length.response_max", "batch.mini",
})
RL_MIN_MARKERS = 3

# Section words that mean "the rollout / inference engine", "the value model", and sections whose
# sampling or batch keys describe something other than training (evaluation, judges).
ROLLOUT = ("rollout", "rollouts", "generation", "generate", "inference", "sampling", "sampler", "actor_rollout")
CRITIC = ("critic", "value", "value_model", "value_head")
REF = ("reference", "ref", "ref_model", "reference_model")
ELSEWHERE = ("eval", "evaluation", "validation", "val", "test", "judge", "reward_model", "rm")
SANDBOX = ("sandbox", "sandbox_config", "code_execution", "execution", "executor", "code_exec")
MODEL = ("model", "policy", "actor", "policy_model")
CKPT = ("checkpoint", "checkpoints", "checkpointing", "ckpt", "save")


class Alias:
    concept: str
    under: tuple  # parent sections that must hold the key (empty: anywhere)
    not_under: tuple  # sections in which the word means something else

    def __init__(self, concept: str, under: tuple = (), not_under: tuple = ()) -> None:
        object.__setattr__(self, "concept", concept)
        object.__setattr__(self, "under", under)
        object.__setattr__(self, "not_under", not_under)

    @recursive_repr()
    def __repr__(self) -> str:
        return (f"{self.__class__.__qualname__}("
            f"concept={self.concept!r}, under={self.under!r}, not_under={self.not_under!r})")

    def __eq__(self, other) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return (self.concept, self.under, self.not_under) == (other.concept, other.under, other.not_under)

    def __hash__(self) -> int:
        return hash((self.concept, self.under, self.not_under))

    __setattr__ = frozen_setattr
    __delattr__ = frozen_delattr


def _aliases() -> dict[str, tuple[Alias, ...]]:
    table: dict[str, list[Alias]] = {}

    def add(words: str, concept: str, under=(), not_under=()):
        for w in words.split():
            table.setdefault(w, []).append(Alias(concept, tuple(under), tuple(not_under)))

    away = ELSEWHERE + CRITIC
    add("advantage_estimator adv_estimator estimator algorithm algo", "run.estimator", not_under=("kl",) + ELSEWHERE)
    add("stage training_stage", "run.stage")
    add("seed random_seed", "run.seed", not_under=ELSEWHERE)
    add("run_name experiment_name", "run.name")
    add("name", "run.name", under=("run", "experiment"))
    add("nodes num_nodes nnodes", "cluster.nodes", not_under=ROLLOUT)
    add("gpus_per_node n_gpus_per_node num_gpus_per_node devices_per_node", "cluster.gpus_per_node",
        not_under=ROLLOUT)
    add("world_size num_gpus total_gpus", "cluster.world_size", not_under=ROLLOUT)
    add("gpus num_gpus n_gpus", "rollout.gpus", under=ROLLOUT)
    add("tensor_parallel_size tensor_model_parallel_size tp_size tensor_parallel", "train.tensor_parallel",
        not_under=ROLLOUT + ELSEWHERE + REF)
    add("tensor_parallel_size tensor_model_parallel_size tp_size tensor_parallel", "rollout.tensor_parallel",
        under=ROLLOUT)
    add("pipeline_parallel_size pipeline_model_parallel_size pp_size pipeline_parallel",
        "train.pipeline_parallel", not_under=ROLLOUT + ELSEWHERE)
    add("context_parallel_size cp_size context_parallel", "train.context_parallel", not_under=ROLLOUT)
    add("data_parallel_size dp_size data_parallel", "train.data_parallel", not_under=ROLLOUT)
    add("prompts_per_step prompt_batch_size num_prompts_per_step prompts_per_batch", "batch.prompts",
        not_under=ELSEWHERE)
    add("prompts", "batch.prompts", under=("batch",))
    add("group_size samples_per_prompt completions_per_prompt num_samples_per_prompt "
        "n_samples_per_prompt rollouts_per_prompt num_completions", "rollout.group_size", not_under=ELSEWHERE)
    add("n", "rollout.group_size", under=ROLLOUT)
    add("rollouts_per_step completions_per_step rollout_batch_size samples_per_step", "batch.rollouts",
        not_under=ELSEWHERE)
    add("rollouts completions", "batch.rollouts", under=("batch",))
    add("mini_batch_size minibatch_size mini_batch", "batch.mini", not_under=away + ROLLOUT)
    add("mini", "batch.mini", under=("batch",))
    add("micro_batch_size micro_batch_size_per_gpu micro_batch_per_gpu micro_batch", "batch.micro_per_gpu",
        not_under=away + ROLLOUT + REF)
    add("micro_per_gpu", "batch.micro_per_gpu", under=("batch",))
    add("gradient_accumulation_steps grad_accum_steps grad_accum accumulation_steps", "batch.grad_accum",
        not_under=away)
    add("ppo_epochs update_epochs policy_epochs inner_epochs epochs_per_step", "optim.epochs", not_under=away)
    add("temperature", "rollout.temperature", not_under=ELSEWHERE)
    add("top_p", "rollout.top_p", not_under=ELSEWHERE)
    add("top_k", "rollout.top_k", not_under=ELSEWHERE)
    add("do_sample sampling", "rollout.sampling", not_under=ELSEWHERE)
    add("max_prompt_length max_prompt_len prompt_max_length max_prompt_tokens", "length.prompt_max",
        not_under=ELSEWHERE)
    add("max_response_length max_response_len response_max_length max_new_tokens max_completion_length "
        "max_generation_length", "length.response_max", not_under=ELSEWHERE)
    add("max_tokens", "length.response_max", under=ROLLOUT)
    add("context_length max_context_length context_window max_seq_len max_sequence_length",
        "rollout.context_max", under=ROLLOUT)
    add("context_length max_context_length context_window max_seq_len max_sequence_length "
        "max_position_embeddings", "model.context_max", under=MODEL)
    add("use_kl kl_enabled", "kl.enabled")
    add("enabled", "kl.enabled", under=("kl",))
    add("kl_coef kl_coeff kl_beta kl_penalty_coef kl_weight init_kl_coef", "kl.coef")
    add("coef coeff beta weight", "kl.coef", under=("kl",))
    add("kl_estimator kl_approx", "kl.estimator")
    add("estimator approx type", "kl.estimator", under=("kl",))
    add("kl_placement", "kl.placement")
    add("placement", "kl.placement", under=("kl",))
    add("kl_target target_kl", "kl.target")
    add("target", "kl.target", under=("kl", "kl_controller"))
    add("kl_horizon", "kl.horizon")
    add("horizon", "kl.horizon", under=("kl", "kl_controller"))
    add("kl_controller kl_controller_type", "kl.controller")
    add("controller controller_type", "kl.controller", under=("kl",))
    add("type kind", "kl.controller", under=("kl_controller",))
    add("coef coeff beta", "kl.coef", under=("kl_controller",))
    add("ref_model reference_model ref_model_path reference_model_path", "reference.source")
    add("path source model model_path name", "reference.source", under=REF)
    add("refresh_every ref_refresh_every sync_every", "reference.refresh_every", under=REF)
    add("ref_refresh_every reference_refresh_every", "reference.refresh_every")
    add("clip_ratio clip_range clip_eps clip_epsilon eps_clip clip_ratio_low clip_low cliprange",
        "clip.low", not_under=CRITIC)
    add("epsilon eps low", "clip.low", under=("clip",))
    add("clip_ratio_high clip_high", "clip.high", not_under=CRITIC)
    add("epsilon_high eps_high high", "clip.high", under=("clip",))
    add("dual_clip dual_clip_c clip_ratio_c", "clip.dual")
    add("dual", "clip.dual", under=("clip",))
    add("value_clip clip_range_vf cliprange_value value_clip_range", "clip.value")
    add("learning_rate lr", "optim.lr", not_under=CRITIC + ELSEWHERE)
    add("learning_rate lr", "critic.lr", under=CRITIC)
    add("critic_lr critic_learning_rate value_lr", "critic.lr")
    add("grad_clip max_grad_norm gradient_clipping clip_grad_norm max_norm", "optim.grad_clip",
        not_under=CRITIC)
    add("warmup_steps lr_warmup_steps num_warmup_steps", "optim.warmup_steps", not_under=CRITIC)
    add("total_steps max_steps total_training_steps train_steps num_train_steps training_steps",
        "schedule.total_steps")
    add("critic_model value_model critic_model_path value_model_path", "critic.source")
    add("path source model model_path", "critic.source", under=CRITIC)
    add("gamma discount discount_factor", "gae.gamma")
    add("lam gae_lambda lambda", "gae.lambda")
    add("reward_functions reward_fns reward_funcs reward_sources rewards reward_components",
        "reward.sources", not_under=ELSEWHERE)
    add("sources components functions", "reward.sources", under=("reward",))
    add("format_pattern format_regex answer_pattern", "reward.format_pattern")
    add("prompt_template chat_template", "template.text")
    add("template", "template.text", under=("prompt", "data", "dataset"))
    add("sandbox", "sandbox.kind")
    add("kind type backend", "sandbox.kind", under=SANDBOX)
    add("network allow_network network_access internet", "sandbox.network", under=SANDBOX)
    add("timeout timeout_s timeout_seconds time_limit time_limit_s wall_time_s", "sandbox.timeout_s",
        under=SANDBOX)
    add("memory_mb memory_limit_mb mem_limit_mb memory_limit", "sandbox.memory_mb", under=SANDBOX)
    add("max_processes processes pids_limit process_limit nproc", "sandbox.processes", under=SANDBOX)
    add("filesystem fs file_system", "sandbox.filesystem", under=SANDBOX)
    add("user run_as", "sandbox.user", under=SANDBOX)
    add("privileged", "sandbox.privileged", under=SANDBOX)
    add("model_path model_name pretrained_model base_model policy_model model_name_or_path", "model.source",
        not_under=ELSEWHERE + CRITIC + REF)
    add("path name source", "model.source", under=MODEL, not_under=ELSEWHERE + CRITIC + REF)
    add("revision model_revision", "model.revision", not_under=ELSEWHERE + CRITIC + REF + ("reward",))
    add("trust_remote_code", "model.trust_remote_code", not_under=ELSEWHERE)
    add("save_steps save_every checkpoint_every save_interval save_freq checkpoint_interval", "checkpoint.every")
    add("every interval steps", "checkpoint.every", under=CKPT)
    add("checkpoint_dir save_dir ckpt_dir checkpoint_path", "checkpoint.dir")
    add("dir path", "checkpoint.dir", under=CKPT)
    add("output_dir out_dir output_path", "output.dir")
    return {k: tuple(v) for k, v in table.items()}


ALIASES = _aliases()

# Names that hold keys rather than a value: a mapping written under one of them is a section
# (``sampling: {temperature: ...}``), never a wrong-shaped value of the concept the word also names.
SECTION_WORDS = frozenset(ROLLOUT + CRITIC + REF + ELSEWHERE + SANDBOX + MODEL + CKPT) | frozenset(
    w for found in ALIASES.values() for a in found for w in a.under)


def normalise_key(key: str) -> str:
    return key.strip().lower().replace("-", "_")


# --- Evaluation sections --------------------------------------------------------------------------
# A run config often holds, beside the training rollout, a block that samples for evaluation,
# validation or testing, with its own temperature, top-p, response length and number of samples.
# Those keys describe another loop: they must not compete with the training rollout's keys, and
# rules about training must not read them. ``evaluation_section`` is the one place that decides
# whether a key sits in such a block (resolve, explain and the key-map draft all ask it).

# Words that name an evaluation block wherever they appear in a section's name
# (``eval``, ``evaluation``, ``eval_sampling``, ``validation_config``, ``benchmarkSettings``).
EVAL_WORDS = frozenset({
    "eval", "evals", "evaluation", "evaluations", "evaluate", "evaluator", "evaluating",
    "validation", "validations", "validate", "validating", "benchmark", "benchmarks", "benchmarking",
    "holdout", "heldout",
})
# Words that name an evaluation block only when nothing around them speaks of code being tested:
# ``test``, ``test_sampling`` and ``val_kwargs`` are evaluation blocks; ``test_cases`` or
# ``unit_tests`` inside a reward or a sandbox are what a code reward runs, not an evaluation.
EVAL_WEAK_WORDS = frozenset({"val", "test", "tests", "testing"})
# Words that, said with a weak word, make it about code under test ...
CODE_TEST_WORDS = frozenset({
    "case", "cases", "suite", "suites", "harness", "command", "commands", "cmd", "runner", "unit", "units",
    "script", "scripts", "code", "input", "inputs", "output", "outputs", "assert", "asserts", "assertion",
    "assertions", "timeout", "coverage", "fixture", "fixtures", "program", "programs", "solution",
    "solutions", "hidden", "public", "private", "pass", "fail",
})
# ... and sections inside which a weak word is about code under test, whatever it is said with.
CODE_SECTION_WORDS = frozenset({
    "reward", "rewards", "verifier", "verifiers", "verify", "verification", "grader", "graders", "checker",
    "sandbox", "execution", "executor", "exec", "judge",
})


def key_words(key: str) -> tuple[str, ...]:
    """The words of one key, lower case: ``evalSampling`` and ``eval-sampling`` give (eval, sampling)."""
    return _key_words(key)


@lru_cache(maxsize=4096)
def _key_words(key: str) -> tuple[str, ...]:
    key = re.sub(r"([a-z0-9])([A-Z])", r"\1_\2", key.strip())
    return tuple(w for w in re.split(r"[^a-z0-9]+", key.lower()) if w and not w.isdigit())


def evaluation_section(sections) -> str | None:
    """The section name that makes a key path's sections an evaluation, validation or test block,
    or None for a training (or neutral) one. ``sections`` are the names of the sections that hold
    the key, outermost first, without the key itself (list indices are skipped).

    A section is an evaluation block when one of its name's words is an evaluation word
    (EVAL_WORDS), or a weak word (EVAL_WEAK_WORDS) that is not said with a code-test word. Nothing
    inside a reward, verifier or sandbox section (CODE_SECTION_WORDS) marks one: there ``test_cases``
    are what the reward runs and an ``evaluator`` is how it grades."""
    code = False
    for name in sections:
        if not isinstance(name, str) or name.isdigit():
            continue
        words = _key_words(name)
        if any(w in CODE_SECTION_WORDS for w in words):
            code = True  # a reward's evaluator, a verifier's tests: how the reward grades, not a block
            continue
        if code:
            continue
        if any(w in EVAL_WORDS for w in words):
            return name
        if any(w in EVAL_WEAK_WORDS for w in words) and not any(w in CODE_TEST_WORDS for w in words):
            return name
    return None


# Words that describe a value of an enumerated concept instead of naming it (generic words of the
# trade): (the value it means, the word sets that describe it). A value whose words hold one set
# describes that value; the longest set said decides, and a value two values' sets describe alike
# fits both (most likely first), and the draft says so.
# KL estimators after Schulman 2020, "Approximating KL Divergence" (from memory): k1 is the naive
# log-ratio estimator (unbiased, high variance); k2, half the squared log ratio, has low variance
# but a bias; k3, (r - 1) - log r, is unbiased with low variance.
VALUE_WORDS: dict[str, tuple[tuple[str, tuple[str, ...]], ...]] = {
    "kl.estimator": (("k3", ("low var", "low variance", "lowvar", "unbiased low var", "unbiased low variance")),
                     ("k2", ("squared", "mse", "sq", "low var", "low variance", "lowvar")),
                     ("k1", ("naive", "log ratio", "logratio", "plain"))),
    "kl.placement": (("reward", ("reward", "rewards", "in reward")), ("loss", ("loss", "in loss", "objective")),
                     ("both", ("reward loss", "loss reward")), ("none", ("off", "disabled"))),
    "sandbox.kind": (("process", ("subprocess", "local process", "process")),
                     ("container", ("container", "containerised", "containerized")),
                     ("vm", ("virtual machine", "microvm", "vm")), ("remote", ("remote", "service", "http", "api")),
                     ("none", ("off", "disabled", "unsandboxed"))),
    "run.estimator": (("grpo", ("group relative", "group norm", "group normalised", "group normalized")),
                      ("rloo", ("leave one out", "loo")), ("reinforce", ("policy gradient", "vanilla pg")),
                      ("ppo", ("clipped surrogate",))),
    "run.stage": (("rl", ("reinforcement",)), ("sft", ("supervised",)), ("distill", ("distillation",))),
}


def described_values(concept: str, written: str) -> tuple[str, ...]:
    """The values of an enumerated concept that a value unknown to trimtab describes in words."""
    words = set(re.split(r"[^a-z0-9]+", re.sub(r"([a-z0-9])([A-Z])", r"\1_\2", written).lower())) - {""}
    found: dict[str, int] = {}
    for meant, phrases in VALUE_WORDS.get(concept, ()):
        said = [len(p.split()) for p in phrases if set(p.split()) <= words]
        if said:
            found[meant] = max(said)
    most = max(found.values(), default=0)
    return tuple(m for m, n in found.items() if n == most)  # the most specific description wins
