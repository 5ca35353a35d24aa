"""``trimtab map CONFIG...``: a draft ``[tool.trimtab.keys]`` block for one layout, from one or
several of its configs (or a folder of them).

For every concept that neither the key map, the alias table nor the native layout placed, each
key that nothing placed is weighed as a candidate:

- **name** (the evidence): the key's words against the concept's own words and the generic words
  of its alias table entries, after folding generic synonyms of the trade (answer / completion /
  sample, question / prompt, step size / learning rate, ...). A key becomes a candidate only on
  name evidence (or a value of the concept's own enumeration, ``grpo``): type, value range and
  section never make a candidate on their own;
- **type**, **value range** (common practice; wide on purpose) and **section** (``decoder`` ~
  rollout) support or weaken a named candidate;
- **the whole layout**: a key written in every config with one value is stronger evidence; a key
  in some configs only is still a candidate.

A key whose value is null, empty or a ``${...}`` reference is a candidate like any other (its value
is set elsewhere). Keys in evaluation, validation or test sections are never candidates for the
training run's concepts.

A live line needs name evidence and no competing key or concept; everything else is written
commented out with all its candidates, for the user to confirm. Every batch count (including those
the alias table placed) carries its unit, asked of the file's own numbers through the run's
arithmetic (``arithmetic.judge``, "Units by evidence" in docs/run-arithmetic.md): where only one
reading is consistent the line states it, otherwise one commented line per reading. An enumerated
concept whose value trimtab does not know gets a proposed ``values = { ... }`` synonym, with why.
"""
from __future__ import annotations

import json
import re
import textwrap
from dataclasses import dataclass, field
from typing import TextIO

from ..common.findings import Location
from ..common.redact import for_text, mask
from ..common.vocabulary import (ALIASES, CONCEPTS, WORD_CONCEPTS, described_values, evaluation_section, normalise_key,
                                 word_concept)
from ..load.document import Mapping, Node, Scalar, Sequence
from ..resolve.arithmetic import COUNTED, Unit, admissible, breaks, judge
from ..resolve.model import RunModel, Value

# Generic synonyms of the trade, folded to one word before names are compared. Phrases first.
PHRASES = {
    "learning_rate": "lr", "step_size": "lr", "stepsize": "lr", "top_p": "topp", "top_k": "topk",
    "time_limit": "timeout", "world_size": "world", "group_size": "group",
}
_SYN_GROUPS = {
    "completion": "answer answers completion completions response responses sample samples generation "
                  "generations rollout rollouts output outputs candidate candidates draw draws",
    "prompt": "prompt prompts question questions query queries problem problems",
    "temperature": "temperature temp heat",
    "kl": "kl divergence kld",
    "coef": "coef coeff coefficient weight scale",
    "clip": "clip clipping clamp",
    "eps": "eps epsilon range band",
    "high": "high upper hi",
    "low": "low lower lo",
    "reference": "reference ref frozen anchor",
    "model": "model weights checkpoint_path",
    "grad": "grad gradient gradients",
    "max": "max maximum limit cap",
    "warmup": "warmup warm",
    "step": "step steps iter iters iteration iterations round rounds",
    "epoch": "epoch epochs passes",
    "gpu": "gpu gpus device devices accelerator accelerators",
    "node": "node nodes machine machines host hosts",
    "length": "length len tokens token",
    "batch": "batch chunk",
    "mini": "mini minibatch",
    "accum": "accum accumulation accumulate",
    "topp": "topp nucleus",
    "gamma": "gamma discount",
    "lambda": "lambda lam",
    "timeout": "timeout",
    "checkpoint": "checkpoint ckpt save",
    "every": "every interval freq frequency",
    "estimator": "estimator algorithm algo objective method family",
    "critic": "critic value",
    "reward": "reward rewards scorer scorers grader graders verifier verifiers",
    "context": "context ctx window seq sequence",
    "tensor": "tensor tp",
    "pipeline": "pipeline pp",
    "per": "per each",
}
SYNONYMS = {w: canon for canon, words in _SYN_GROUPS.items() for w in words.split()}
WEAK = frozenset({"per", "max", "total", "length"})  # words that say nothing on their own
# Words many concepts share: evidence only together with another word, or as the concept's whole name.
GENERIC = frozenset({"step", "batch", "model", "every"})
UNIT_WORDS = {"length": "tokens"}  # a key with this word counts in this unit (and a concept in it has it)
# Words of one slot: a key that says one of them and a name that says another name different things.
EXCLUSIVE = (frozenset({"prompt", "completion"}), frozenset({"high", "low"}), frozenset({"mini", "micro"}),
             frozenset({"gpu", "node"}))
STOP = frozenset("size num n number count of the in a an for to is use do".split())

# Extra generic words of a concept's meaning that its aliases do not carry.
EXTRA_WORDS = {
    "batch.mini": "update_batch optimizer_batch completions_per_update",
    "batch.micro_per_gpu": "batch_per_gpu forward_batch completions_per_gpu",
    "optim.epochs": "epochs passes",
    "rollout.temperature": "temperature",
    "kl.coef": "kl_coef",
    "reference.source": "reference_model frozen_model",
}

# Words of the sections a concept's area is usually written under.
AREA_WORDS = {
    "run": "run experiment recipe algo algorithm job",
    "cluster": "cluster launch launcher resources hardware distributed infra hosting",
    "train": "train training trainer parallel parallelism distributed learner actor policy",
    "rollout": "rollout rollouts generation gen generate generator decoder decode decoding sampling sampler "
               "inference engine",
    "batch": "batch batching data dataset learner train training",
    "optim": "optim optimizer optimiser opt learner train training policy actor",
    "length": "length lengths data dataset rollout generation gen decoder decoding sampling sampler tokens",
    "kl": "kl regulariser regularizer regularization regularisation penalty",
    "reference": "reference ref kl regulariser regularizer",
    "clip": "clip clipping trust trust_region ppo loss policy_loss",
    "schedule": "schedule scheduler trainer train training learner",
    "critic": "critic value",
    "gae": "gae advantage advantages returns",
    "reward": "reward rewards",
    "template": "prompt prompts data dataset template",
    "sandbox": "sandbox executor execution",
    "model": "model policy actor",
    "checkpoint": "checkpoint checkpoints checkpointing ckpt save",
    "output": "output outputs",
}

# Value ranges usually seen for a concept (common practice, deliberately wide): (low, high).
RANGES = {
    "optim.lr": (1e-9, 1e-2), "critic.lr": (1e-9, 1e-2),
    "rollout.temperature": (0.0, 2.0), "rollout.top_p": (0.0, 1.0), "rollout.top_k": (-1, 100_000),
    "rollout.group_size": (1, 512), "kl.coef": (0.0, 1.0), "kl.target": (0.0, 1.0),
    "kl.horizon": (1, 10_000_000), "clip.low": (0.0, 1.0), "clip.high": (0.0, 1.0), "clip.dual": (1.0, 100.0),
    "clip.value": (0.0, 100.0), "gae.gamma": (0.0, 1.0), "gae.lambda": (0.0, 1.0),
    "optim.grad_clip": (0.0, 1000.0), "optim.epochs": (1, 100), "optim.warmup_steps": (0, 10_000_000),
    "schedule.total_steps": (1, 100_000_000), "length.prompt_max": (1, 10_000_000),
    "length.response_max": (1, 10_000_000), "rollout.context_max": (1, 10_000_000),
    "model.context_max": (1, 10_000_000), "cluster.nodes": (1, 100_000), "cluster.gpus_per_node": (1, 64),
    "cluster.world_size": (1, 1_000_000), "batch.prompts": (1, 10_000_000), "batch.rollouts": (1, 100_000_000),
    "batch.mini": (1, 100_000_000), "batch.micro_per_gpu": (1, 100_000), "batch.grad_accum": (1, 100_000),
    "train.tensor_parallel": (1, 1024), "train.pipeline_parallel": (1, 1024), "train.context_parallel": (1, 1024),
    "rollout.tensor_parallel": (1, 1024), "train.data_parallel": (1, 1_000_000),
    "sandbox.timeout_s": (0.0, 86_400.0), "sandbox.memory_mb": (1.0, 10_000_000.0),
    "checkpoint.every": (1, 100_000_000), "reference.refresh_every": (1, 100_000_000),
}

# Values that say nothing about an enumeration on their own (they name a value of several).
PLAIN_VALUES = frozenset({"none", "true", "false", "on", "off", "yes", "no", "null", ""})

_ENUMERATED = frozenset(v for c in CONCEPTS.values() for v in c.values) - PLAIN_VALUES
MIN_NAME = 0.4  # the least name overlap (Dice) that counts as name evidence
LIVE_MARGIN = 1.0  # a live line leads every other candidate by at least this score
W_NAME, W_SECTION, W_RANGE, W_RANGE_OUT, W_ENUM, W_EVERY = 3.0, 1.5, 1.0, -2.0, 3.0, 0.5
SET_ELSEWHERE = "set elsewhere"


def _split(key: str) -> list[str]:
    key = re.sub(r"([a-z0-9])([A-Z])", r"\1_\2", key)
    key = normalise_key(key)
    for phrase, word in PHRASES.items():
        key = re.sub(rf"(?:^|(?<=_)){phrase}(?=_|$)", word, key)
    return [w for w in re.split(r"[_.\s/]+", key) if w]


def _fold(words) -> frozenset[str]:
    return frozenset(SYNONYMS.get(w, w) for w in words if w not in STOP and not w.isdigit())


@dataclass(frozen=True)
class _Name:
    """One way of naming a concept: its own leaf name, an alias word, or an extra generic phrase."""

    label: str
    words: frozenset
    under: tuple = ()
    not_under: tuple = ()


_NAMES: dict[str, list[_Name]] | None = None


def concept_names() -> dict[str, list[_Name]]:
    global _NAMES
    if _NAMES is None:
        names: dict[str, list[_Name]] = {}
        for c in CONCEPTS:
            leaf = c.split(".", 1)[1]
            names[c] = [_Name(leaf, _fold(_split(leaf)))]
        for alias_word, aliases in ALIASES.items():
            for a in aliases:
                names[a.concept].append(_Name(alias_word, _fold(_split(alias_word)), a.under, a.not_under))
        for c, extra in EXTRA_WORDS.items():
            names[c].extend(_Name(w, _fold(_split(w))) for w in extra.split())
        _NAMES = {c: [n for n in ns if n.words] for c, ns in names.items()}
    return _NAMES


def _name_score(concept: str, leaf_words: frozenset, parents: list[str]) -> tuple[float, _Name | None]:
    """The best Dice overlap between the key's words and one name of the concept (an alias with
    a section condition counts only under that section, as in the alias table). A key that says
    "per" (``devices_each``) names a ratio: it is no evidence for a name that does not say it."""
    best, which = 0.0, None
    for n in concept_names()[concept]:
        if n.under and (not parents or parents[-1] not in n.under):
            continue
        if n.not_under and any(p in n.not_under for p in parents):
            continue
        if "per" in leaf_words and "per" not in n.words:
            continue
        shared = leaf_words & n.words
        if not shared - WEAK:
            continue
        if any(leaf_words & group and n.words & group and not shared & group for group in EXCLUSIVE):
            continue  # the key says answers where the name says prompts: another quantity
        if not shared - WEAK - GENERIC and not n.words <= leaf_words:
            continue  # only words every count has in common (steps, a batch), and not the whole name
        mine, theirs = leaf_words - WEAK, n.words - WEAK
        dice = 2 * len(shared - WEAK) / (len(mine) + len(theirs))
        if dice > best:
            best, which = dice, n
    return best, which


@dataclass
class UnitOption:
    """One reading of a batch count, with what the file's own numbers say about it."""

    unit: Unit
    status: str  # consistent | broken | unknown | stated (the key's own words say it)
    why: str = ""

    def text(self) -> str:
        return f"{self.unit.words()}: {self.status}" + (f" ({self.why})" if self.why else "")


@dataclass
class Candidate:
    concept: str
    key: str
    node: Node
    score: float
    reasons: list[str]
    name: float = 0.0
    enum: bool = False
    strong: bool = False  # enough evidence for a live line (a name with a section or two words)
    unit: tuple = ()  # (("per", "prompt"), ("scope", "gpu")) when the key's name says so
    late: str = ""  # null | empty | a reference: the value is set elsewhere
    value_text: str = ""
    runs: int = 1  # how many of the drafted runs hold the key
    values_seen: set = field(default_factory=set)
    placed: bool = False  # the key map, the alias table or the native layout already reads it here
    options: list[UnitOption] = field(default_factory=list)  # batch counts: every admissible reading
    proposal: tuple = ()  # (value as written, the values it describes) for an unknown enumerated value

    @property
    def chosen(self) -> Unit | None:
        """The one reading the evidence leaves (or the key's own words state), else None."""
        if not self.options:
            return None
        if len(self.options) == 1:
            return self.options[0].unit
        open_ = [o for o in self.options if o.status != "broken"]
        if len(open_) == 1 and open_[0].status == "consistent":
            return open_[0].unit
        return None

    def unit_lines(self) -> list[UnitOption]:
        """The readings to offer as lines: the chosen one, else every one not ruled out."""
        chosen = self.chosen
        if chosen is not None:
            return [o for o in self.options if o.unit == chosen]
        open_ = [o for o in self.options if o.status != "broken"]
        return open_ or list(self.options)

    def toml_value(self, unit: Unit | None = None, values: bool = False) -> str:
        parts = []
        if unit is not None:
            parts.append(f"per = {_q(unit.per)}, scope = {_q(unit.scope)}")
        elif self.unit:
            parts.append(", ".join(f"{k} = {_q(v)}" for k, v in self.unit))
        if values and self.proposal and len(self.proposal[1]) >= 1:
            parts.append("values = { " + _q(self.proposal[0]) + " = " + _q(self.proposal[1][0]) + " }")
        if not parts:
            return _q(self.key)
        return "{ key = " + _q(self.key) + ", " + ", ".join(parts) + " }"

    @property
    def line(self) -> int:
        return self.node.line

    @property
    def settled(self) -> bool:
        """Can this candidate be a live line as it stands (unit and value settled)?"""
        if self.options and self.chosen is None:
            return False
        return not self.proposal


@dataclass
class Draft:
    path: str
    placed: dict[str, str] = field(default_factory=dict)  # concept -> key, as resolved today
    live: dict[str, Candidate] = field(default_factory=dict)  # concept -> the one confident candidate
    ambiguous: dict[str, list[Candidate]] = field(default_factory=dict)  # concept -> candidates to confirm
    questions: dict[str, Candidate] = field(default_factory=dict)  # placed concepts asked their unit or value
    absent: list[str] = field(default_factory=list)  # concepts with no candidate in the file
    unmatched: list[tuple[str, Node]] = field(default_factory=list)  # keys nothing placed or matched
    evaluation: list[tuple[str, Node, str]] = field(default_factory=list)  # (key, node, section) not for training
    documents: int = 1
    files: int = 1

    def toml(self) -> str:
        lines = ["# Draft written by `trimtab map` for " + for_text(self.path) + ": confirm every line before you rely on it.",
                 "# In a trimtab.toml write the header as [keys].",
                 "[tool.trimtab.keys]"]
        for concept in sorted(self.live):
            c = self.live[concept]
            lines.extend("# " + for_text(mask(n)) for n in _unit_evidence(c))
            lines.append(f"{_q(concept)} = {c.toml_value(c.chosen)}  # {for_text(mask('; '.join(c.reasons)))}")
        for concept in sorted(self.questions):
            c = self.questions[concept]
            if c.settled:
                lines.extend("# " + for_text(mask(n)) for n in _unit_evidence(c))
                lines.append(f"{_q(concept)} = {c.toml_value(c.chosen)}  # {for_text(mask('; '.join(c.reasons)))}")
        for concept in sorted(set(self.ambiguous) | {c for c, q in self.questions.items() if not q.settled}):
            cands = self.ambiguous.get(concept) or [self.questions[concept]]
            lines.append(f"# {concept}: {_state(cands)} ({CONCEPTS[concept].meaning})")
            for c in cands:
                lines.extend("# " + for_text(mask(n)) for n in _unit_evidence(c))
                for unit in ([o.unit for o in c.unit_lines()] or [None]):
                    lines.append(f"# {_q(concept)} = {c.toml_value(unit, values=True)}  "
                                 f"# {for_text(mask('; '.join(c.reasons + _line_reasons(c, unit))))}")
        return "\n".join(lines) + "\n"

    def report(self, out: TextIO, draft_to: str | None) -> None:
        docs = f" ({self.documents} documents)" if self.documents > self.files else ""
        out.write(f"{for_text(self.path)}{docs}: {len(self.placed)} concept(s) placed by the key map, the alias table or "
                  f"the native layout; {len(self.live) + len(self.ambiguous)} more have candidate keys.\n")
        if self.questions:
            out.write("\nPlaced, with a question (a unit the numbers decide, or a value trimtab does not know):\n")
            for concept in sorted(self.questions):
                c = self.questions[concept]
                out.write(f"  {concept} ({CONCEPTS[concept].meaning}): {for_text(c.key)}  line {c.line}: {_shown(c)}\n")
                for n in _unit_evidence(c) + _proposal_words(c):
                    out.write(f"      {for_text(mask(n))}\n")
        if self.live or self.ambiguous:
            out.write("\nCould not place (candidates, with why):\n")
            for concept in sorted(set(self.live) | set(self.ambiguous)):
                cands = [self.live[concept]] if concept in self.live else self.ambiguous[concept]
                state = "drafted" if concept in self.live else (
                    f"ambiguous: {len(cands)} candidates, left commented out" if len(cands) > 1
                    else "to confirm: left commented out")
                out.write(f"  {concept} ({CONCEPTS[concept].meaning}): {state}\n")
                for c in cands:
                    out.write(f"      {for_text(c.key)}  line {c.line}: {_shown(c)}  -- "
                              f"{for_text(mask('; '.join(c.reasons)))}\n")
                    for n in _unit_evidence(c) + _proposal_words(c):
                        out.write(f"        {for_text(mask(n))}\n")
        if self.absent:
            out.write("\nNo candidate key in " + ("this file" if self.files == 1 else "these files") + ":\n")
            out.write(textwrap.fill(", ".join(self.absent), 96, initial_indent="  ", subsequent_indent="  ") + "\n")
        if self.evaluation:
            out.write("\nKeys in evaluation, validation or test sections (not candidates for the training run):\n")
            text = ", ".join(f"{for_text(k)} (line {n.line})" for k, n, _s in self.evaluation)
            out.write(textwrap.fill(text, 96, initial_indent="  ", subsequent_indent="  ") + "\n")
        if self.unmatched:
            out.write("\nKeys no concept matched (not used by any rule):\n")
            text = ", ".join(f"{for_text(k)} (line {n.line})" for k, n in self.unmatched)
            out.write(textwrap.fill(text, 96, initial_indent="  ", subsequent_indent="  ") + "\n")
        if draft_to:
            out.write(f"\nDraft key map written to {for_text(draft_to)}.\n")
        else:
            out.write("\n" + self.toml())


def _state(cands: list[Candidate]) -> str:
    if len(cands) > 1:
        return "ambiguous, uncomment the right line"
    c = cands[0]
    if c.options and c.chosen is None:
        return "the unit is not settled by the numbers, uncomment the line with the right unit"
    if c.proposal:
        return "a value trimtab does not know, confirm what it means"
    return "confirm"


def _line_reasons(c: Candidate, unit: Unit | None) -> list[str]:
    out = []
    if unit is not None and len(c.options) > 1 and c.chosen is None:
        out.append(f"if it counts {unit.words()}")
    return out + _proposal_words(c)


def _proposal_words(c: Candidate) -> list[str]:
    if not c.proposal:
        return []
    written, fits = c.proposal
    known = ", ".join(CONCEPTS[c.concept].values)
    if not fits:
        return [f"value '{written}' is none of the {c.concept} values trimtab knows ({known}); add "
                f"values = {{ {json.dumps(written)} = \"...\" }} with the one it means"]
    if len(fits) == 1:
        return [f"value '{written}' is none of the {c.concept} values trimtab knows; its words describe {fits[0]}"]
    return [f"value '{written}' is none of the {c.concept} values trimtab knows; its words fit "
            f"{' or '.join(fits)}: the line says {fits[0]}, confirm which"]


def _q(text: str) -> str:
    return json.dumps(mask(text), ensure_ascii=False)


def _unit_evidence(c: Candidate) -> list[str]:
    """The unit question of a batch count, answered from the file's own numbers where they can."""
    if not c.options:
        return []
    head = f"unit of {c.key} = {_shown(c)} ({c.concept}): "
    chosen = c.chosen
    if len(c.options) == 1:
        o = c.options[0]
        return [head + f"{o.unit.words()}, as {o.why or 'the key map reading'}"
                + ("" if o.status in ("consistent", "stated") else f"; under it: {o.status}")]
    others = "; ".join(o.text() for o in c.options if o.unit != chosen)
    if chosen is not None:
        return [head + f"{chosen.words()} is the only reading the file's numbers make consistent", "  " + others]
    return [head + "the file's numbers do not settle it", "  " + "; ".join(o.text() for o in c.options)]


def _shown(c: Candidate) -> str:
    if c.late:
        return f"{SET_ELSEWHERE} ({c.late})"
    node = c.node
    if isinstance(node, Scalar):
        text = mask(node.text)  # masked whole, then shortened: no part of a credential stays
        return for_text(text if len(text) <= 40 else text[:37] + "...")
    return f"<{node.kind}>"


# --- evidence -------------------------------------------------------------------------------------
def _kind(node: Node, version: str):
    if isinstance(node, Scalar):
        return node.value(version)
    return node


def _late(node: Node, version: str) -> str:
    """How a value is left to be set elsewhere (null, empty, a ``${...}`` reference), or ''."""
    if isinstance(node, Mapping) and not (node.pairs or node.merged):
        return "empty"
    if not isinstance(node, Scalar):
        return ""
    value = node.value(version)
    if value is None:
        return "null" if node.text.strip() else "empty"
    if isinstance(value, str):
        if not value.strip():
            return "empty"
        if "${" in value:
            return "a reference"
    return ""


def _type_fits(value, concept: str) -> bool:
    t = CONCEPTS[concept].type
    if isinstance(value, (Mapping, Sequence)):
        if t == "list":
            items = value.items if isinstance(value, Sequence) else [v for _n, _k, v, _m in value.entries()]
            return bool(items) and all(isinstance(i, (Mapping, Scalar)) for i in items)
        return False
    if value is None:
        return False
    if t == "int":
        return isinstance(value, int) and not isinstance(value, bool)
    if t == "number":
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if t == "bool":
        return isinstance(value, bool)
    if t == "str":
        return isinstance(value, str)
    if t == "any":
        return isinstance(value, (str, bool))
    return False


def score(concept: str, path: tuple[str, ...], node: Node, version: str) -> Candidate | None:
    """A key as a candidate for a concept, with its reasons; None without name evidence (or a value
    of the concept's enumeration): type, value range and section only support a named candidate."""
    late = _late(node, version)
    value = _kind(node, version)
    if not late and not _type_fits(value, concept):
        return None
    c = CONCEPTS[concept]
    leaf = path[-1]
    leaf_words = _fold(_split(leaf))
    parents = [normalise_key(p) for p in path[:-1] if not p.isdigit()]
    if concept in WORD_CONCEPTS:  # a KL term's place and role are read from the key's words, or not at all
        found = word_concept(normalise_key(leaf), parents[-1] if parents else "")
        if found is None or found[0] != concept:
            return None
    for word, unit in UNIT_WORDS.items():
        if (word in leaf_words) != (c.unit == unit):
            return None  # a count of tokens is a length, and a length is a count of tokens
    reasons: list[str] = []
    name, which = _name_score(concept, leaf_words, parents) if leaf_words else (0.0, None)
    if name < MIN_NAME:
        name, which = 0.0, None  # one shared word of many is no evidence
    if which is not None:
        shared = ", ".join(sorted(leaf_words & which.words))
        reasons.append(f"name: '{leaf}' ~ '{which.label}' ({shared})")
    enum = False
    proposal: tuple = ()
    if not c.values and isinstance(value, str) and not late and value.strip().lower() in _ENUMERATED:
        return None  # a value of an enumeration (grpo, k3) is that concept's, not a name or a path
    if c.values and isinstance(value, str) and not late:
        written = value.strip().lower()
        enum = written in c.values and written not in PLAIN_VALUES
        if written in c.values:
            reasons.append(f"value '{value}' is one of the {concept} values")
        elif any(written in o.values for o in CONCEPTS.values() if o.name != concept):
            return None  # the value names another concept's value (grpo is an estimator, not a KL one)
        elif name:
            proposal = (value.strip(), described_values(concept, value))
    if not name and not enum:
        return None  # no evidence names the concept
    area_name = concept.split(".")[0]
    area = set(AREA_WORDS.get(area_name, "").split()) | {area_name}
    near = [p for p in parents if p in area or set(_split(p)) & area]
    section = 1.0 if near else 0.0
    if near:
        reasons.append(f"section '{near[-1]}' ~ {area_name}")
    total = W_NAME * name + W_SECTION * section + (W_ENUM if enum else 0.0)
    if late:
        reasons.append(f"value {SET_ELSEWHERE} ({late}): type and range unknown")
    else:
        reasons.append(f"type {c.type}" if c.type != "any" else "type text or boolean")
    bounds = RANGES.get(concept)
    if not late and bounds is not None and isinstance(value, (int, float)) and not isinstance(value, bool):
        low, high = bounds
        in_range = low <= value <= high
        total += W_RANGE if in_range else W_RANGE_OUT
        reasons.append(f"{value!r} {'within' if in_range else 'outside'} the usual {low:g}..{high:g}")
    if total <= 0:
        return None
    words = len((leaf_words & which.words) - WEAK) if which is not None else 0
    strong = bool(name) and (name >= 0.5 and (section or words >= 2) or enum)
    hint = _unit_hint(c, leaf_words)
    if hint:
        # the key's name says it counts in another unit: offered with that unit, for confirmation
        reasons.append("the name says " + ", ".join(f"{k} = {v}" for k, v in hint) + " (confirm)")
        strong = False
    text = node.text.strip() if isinstance(node, Scalar) else f"<{node.kind}>"
    return Candidate(concept, ".".join(path), node, total, reasons, name, enum, bool(strong), hint, late, text,
                     proposal=proposal)


def _unit_hint(c, words: frozenset) -> tuple:
    """(("per", ...), ("scope", ...)) where the key's own words name a unit other than the
    concept's: "per GPU" for a global count, prompts for a count of completions."""
    out = []
    if c.per == "completion" and "prompt" in words and "completion" not in words:
        out.append(("per", "prompt"))
    if c.scope == "global" and "gpu" in words and "per" in words:
        out.append(("scope", "gpu"))
    return tuple(out)


def _keys(root: Node):
    """(key path, node) of every mapping value that is not a section (scalars, lists), each once."""
    seen: set[int] = set()
    stack: list[tuple[tuple, Node]] = [((), root)]
    while stack:
        path, node = stack.pop()
        if id(node) in seen:
            continue
        seen.add(id(node))
        if isinstance(node, Mapping):
            for name, _k, v, _via in reversed(list(node.entries())):
                if isinstance(v, Mapping) and (v.pairs or v.merged):
                    stack.append((path + (name,), v))
                else:
                    yield path + (name,), v


# --- one draft from every run of the layout ---------------------------------------------------------
def _roots(m: RunModel):
    from ..compose.sources import runs_of

    roots = runs_of(m.doc)
    return roots[m.index] if roots and m.index < len(roots) else None


def draft(runs: list[RunModel], path: str) -> Draft:
    d = Draft(path, documents=len(runs) or 1, files=len({m.path for m in runs}) or 1)
    candidates: dict[tuple[str, str], Candidate] = {}
    seen_in: dict[str, list[str]] = {}  # key -> its value text in each run that holds it
    taken: set[str] = set()
    placed_values: dict[str, list[tuple[RunModel, Value]]] = {}
    for m in runs:
        for concept, v in m.values.items():
            if v.key:
                d.placed.setdefault(concept, v.key)
                placed_values.setdefault(concept, []).append((m, v))
                taken.add(v.key)
    all_keys: dict[str, Node] = {}
    elsewhere: dict[str, tuple[Node, str]] = {}
    for m in runs:
        root = _roots(m)
        if root is None:
            continue
        for p, node in _keys(root):
            key = ".".join(p)
            if key in taken or any(key.startswith(t + ".") for t in taken):
                continue
            section = evaluation_section(list(p[:-1]))
            if section is not None:
                elsewhere.setdefault(key, (node, section))  # another loop's keys: never the training run's
                continue
            all_keys.setdefault(key, node)
            seen_in.setdefault(key, []).append(node.text.strip() if isinstance(node, Scalar) else f"<{node.kind}>")
            reader = m.reader(node)[0]  # the reader the file meets (JSON, YAML 1.1 or 1.2, ...)
            for concept in CONCEPTS:
                if concept in d.placed:
                    continue
                c = score(concept, p, node, reader)
                if c is None:
                    continue
                prev = candidates.get((c.concept, key))
                if prev is None or c.score > prev.score:
                    candidates[(c.concept, key)] = c
    d.evaluation = sorted(((k, n, s) for k, (n, s) in elsewhere.items()), key=lambda t: t[1].line)
    if len(runs) > 1:
        for c in candidates.values():
            _weigh_layout(c, seen_in[c.key], len(runs))
    by_concept: dict[str, list[Candidate]] = {}
    by_key: dict[str, list[Candidate]] = {}
    for c in candidates.values():
        by_concept.setdefault(c.concept, []).append(c)
        by_key.setdefault(c.key, []).append(c)
    # Live lines: named, mutual best with a clear lead over every other key and concept, taken
    # one at a time from the strongest.
    used_keys: set[str] = set()
    while True:
        best = None
        for concept, cands in by_concept.items():
            if concept in d.live:
                continue
            avail = sorted((c for c in cands if c.key not in used_keys), key=lambda c: -c.score)
            if not avail:
                continue
            top = avail[0]
            if not top.strong:
                continue
            if len(avail) > 1 and (avail[1].score > top.score - LIVE_MARGIN or avail[1].name > top.name):
                continue  # a competing key
            rivals = [c for c in by_key[top.key] if c.concept != concept and c.concept not in d.live]
            if any(r.score > top.score - LIVE_MARGIN or r.name > top.name for r in rivals):
                continue  # a competing concept
            if best is None or top.score > best.score:
                best = top
        if best is None:
            break
        d.live[best.concept] = best
        used_keys.add(best.key)
    for concept, cands in by_concept.items():
        if concept in d.live:
            continue
        avail = sorted((c for c in cands if c.key not in used_keys), key=lambda c: (-c.score, c.key))
        if avail:
            d.ambiguous[concept] = avail[:5]
    # Questions the numbers or the vocabulary must answer: units of every batch count, values of
    # enumerations trimtab does not know. A live line that leaves one open is confirmed by hand.
    _questions(d, placed_values)
    _ask_units(d, runs)
    for concept in [c for c, cand in d.live.items() if not cand.settled]:
        d.ambiguous[concept] = [d.live.pop(concept)]
    d.absent = [c for c in CONCEPTS if c not in d.placed and c not in d.live and c not in d.ambiguous]
    matched = {c.key for c in d.live.values()} | {c.key for cs in d.ambiguous.values() for c in cs}
    d.unmatched = sorted(((k, n) for k, n in all_keys.items() if k not in matched), key=lambda kn: kn[1].line)
    return d


def _weigh_layout(c: Candidate, texts: list[str], runs: int) -> None:
    """A key in every config of the layout with one value is stronger evidence; in some only, it is
    still a candidate."""
    c.runs = len(texts)
    c.values_seen = set(texts)
    if len(texts) == runs and len(c.values_seen) == 1:
        c.score += W_EVERY
        c.reasons.append(f"in all {runs} configs, always {mask(texts[0])}")
    elif len(texts) == runs:
        c.reasons.append(f"in all {runs} configs ({len(c.values_seen)} different values)")
    else:
        c.reasons.append(f"in {len(texts)} of {runs} configs")


def _questions(d: Draft, placed_values: dict[str, list[tuple[RunModel, Value]]]) -> None:
    """Concepts the alias table placed are asked the same questions: their unit (a batch count),
    and what a value trimtab does not know means (an enumeration)."""
    for concept, found in placed_values.items():
        m, v = found[0]
        if v.via not in ("alias", "native") or not isinstance(v.node, Scalar):
            continue  # the key map already says what the user means
        c = CONCEPTS[concept]
        counted = concept in COUNTED and v.unit is None and v.via == "alias"  # native: trimtab's own unit
        unknown = (c.values and isinstance(v.value, str) and v.value.strip().lower() not in c.values
                   and not _late(v.node, m.reader(v.node)[0]))
        if not counted and not unknown:
            continue
        how = "the alias table" if v.via == "alias" else "the native layout"
        cand = Candidate(concept, v.key, v.node, 0.0, [f"placed by {how} ('{v.key.rsplit('.', 1)[-1]}')"],
                         placed=True, late=_late(v.node, m.reader(v.node)[0]),
                         value_text=v.node.text.strip())
        if unknown:
            cand.proposal = (str(v.value).strip(), described_values(concept, str(v.value)))
        d.questions[concept] = cand


def _ask_units(d: Draft, runs: list[RunModel]) -> None:
    """Every batch count in the draft asks its unit of the file's own numbers: the run's
    arithmetic is worked out with the draft's live lines under every admissible reading."""
    asked = [c for c in d.live.values() if c.concept in COUNTED]
    asked += [c for cs in d.ambiguous.values() for c in cs if c.concept in COUNTED]
    asked += [c for c in d.questions.values() if c.concept in COUNTED]
    for cand in asked:
        cand.options = _unit_options(cand, d, runs)


def _value_at(m: RunModel, root: Node, concept: str, key: str) -> Value | None:
    node: Node | None = root
    for part in key.split("."):
        if not isinstance(node, Mapping):
            return None
        node = next((v for name, _k, v, _via in node.entries() if name == part), None)
    if not isinstance(node, Scalar):
        return None
    value = m.read(node)
    return Value(concept, value, Location(m.path, node.line, node.col), node, "alias", key, raw=value)


def _unit_options(cand: Candidate, d: Draft, runs: list[RunModel]) -> list[UnitOption]:
    """The readings of one candidate batch count and, for each, what the numbers of every run that
    holds the key say (broken in one run rules a reading out)."""
    merged: dict[Unit, UnitOption] = {}
    order: list[Unit] = []
    for m in runs:
        root = _roots(m)
        if root is None:
            continue
        mine = _value_at(m, root, cand.concept, cand.key)
        if mine is None:
            continue
        values = {c: v for c, v in m.values.items() if c != cand.concept}
        for other in d.live.values():
            if other.concept not in values and other.concept != cand.concept:
                v = _value_at(m, root, other.concept, other.key)
                if v is not None:
                    values[other.concept] = v
        values[cand.concept] = mine
        units = admissible(mine)
        words = _stated_by(mine, units)
        written = mine.value
        if not isinstance(written, (int, float)) or isinstance(written, bool):
            found = {u: UnitOption(u, "unknown", f"value {SET_ELSEWHERE}") for u in units}
        else:
            verdict = judge(RunModel(doc=m.doc, index=m.index, values=values, version=m.version, readers=m.readers,
                                     reader_named=m.reader_named,
                                     settings=m.settings))
            found = _by_unit(cand.concept, units, verdict)
        if words and len(units) == 1:
            found = {u: UnitOption(u, "stated", words) for u in units}
        prefix = f"{m.path}: " if d.files > 1 and not words else ""
        for u, o in found.items():
            if u not in merged:
                order.append(u)
                merged[u] = UnitOption(u, o.status, prefix + o.why if o.why else "")
                continue
            have = merged[u]
            if have.status == "broken" or o.status == have.status:
                continue
            if o.status == "broken" or o.status == "consistent" and have.status == "unknown":
                merged[u] = UnitOption(u, o.status, prefix + o.why if o.why else "")
    return [merged[u] for u in order]


def _stated_by(v: Value, units: tuple) -> str:
    """Why a count has a single reading: the key's own words, or the concept's own dotted name."""
    if len(units) != 1:
        return ""
    if v.key.replace("_", "") == v.concept.replace("_", ""):
        return "the concept's own name says"
    return f"the key's own words ('{v.key.rsplit('.', 1)[-1]}') say"


def _by_unit(concept: str, units: tuple, verdict) -> dict[Unit, UnitOption]:
    """Each reading of one count: consistent when some reading of the whole run with it is,
    broken when every one breaks (with what breaks), unknown otherwise (with what is missing)."""
    out: dict[Unit, UnitOption] = {}
    have_key: dict[Unit, tuple] = {}
    rank = {"consistent": 0, "unknown": 1, "broken": 2}

    def others(a) -> tuple:
        return tuple((c, u) for c, u in a.reading if c != concept)

    # what breaks is told under the best reading of the other counts, so that it is this count's doing
    best_others: dict[tuple, int] = {}
    for a, s in verdict.considered:
        best_others[others(a)] = min(rank[s], best_others.get(others(a), 2))
    for a, status in verdict.considered:
        u = dict(a.reading).get(concept, units[0] if units else None)
        if u is None:
            continue
        why = {"consistent": "",
               "broken": "; ".join(breaks(a)),
               "unknown": "needs " + "; ".join(dict.fromkeys(t.missing for t in a.terms.values()
                                                               if t.missing and t.ambiguous))}[status]
        key = (rank[status], best_others[others(a)], len(why))
        if u not in out or key < have_key[u]:
            out[u] = UnitOption(u, status, why)
            have_key[u] = key
    for u in units:
        out.setdefault(u, UnitOption(u, "unknown", ""))
    return {u: out[u] for u in units}


def draft_command(outcome, output: str | None, out: TextIO, err: TextIO, folders: tuple = ()) -> int:
    """Draft one key map from every checked file of the request (a pipeline Outcome with its models
    kept): one config, several of one layout, or a folder of them."""
    from ..report.explain import not_checked, problems_of

    if not outcome.files and not outcome.missing and folders:
        named = ", ".join(folders)
        err.write(f"trimtab: error: {for_text(named)}: no config to map (no file the settings include)\n")
        return 2
    if not_checked(outcome, err):
        return 2
    shown = [s for _p, s in outcome.files]
    runs = [m for s in shown for m in outcome.models(s)]
    for s in shown:
        for p in problems_of(outcome, s):
            err.write(for_text(p) + "\n")
    if not runs:
        what = shown[0] if len(shown) == 1 else f"{len(shown)} files"
        err.write(f"trimtab: error: {for_text(what)}: nothing to map (the file could not be read as YAML or JSON)\n")
        return 2
    label = shown[0] if len(shown) == 1 else f"{len(shown)} configs of one layout ({', '.join(shown[:3])}" + (
        ", ...)" if len(shown) > 3 else ")")
    d = draft(runs, label)
    if output:
        from ..common.paths import write_atomic

        write_atomic(output, d.toml())
    d.report(out, output)
    return 0
