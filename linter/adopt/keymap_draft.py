"""``trimtab map CONFIG``: a draft ``[tool.trimtab.keys]`` block for the keys trimtab could not place.

For every concept that neither the key map, the alias table nor the native layout placed, each
key of the file that nothing placed is weighed as a candidate on four kinds of evidence, and
every candidate is listed with its reasons:

- **name**: the key's words against the concept's own words and the generic words of its alias
  table entries, after folding generic synonyms of the trade (answer / completion / sample,
  question / prompt, step size / learning rate, ...);
- **type**: the value must have the concept's type (a count is an integer, a rate a number);
- **value range**: a value inside the range usually seen for the concept (common practice; the
  ranges are wide on purpose) counts for it, one outside counts against; a value of an
  enumeration (``grpo``) counts strongly;
- **section**: the key's parent sections against the concept's area (``decoder`` ~ rollout).

A candidate is written as a live line only when the evidence names it (name evidence, or a value
of the concept's enumeration), it is the best candidate for the concept and the concept the best
for the key, and it leads every other candidate clearly. Everything else is written commented out
with all its candidates, for the user to confirm: the draft never guesses silently.
"""
from __future__ import annotations

import json
import re
import textwrap
from dataclasses import dataclass, field
from typing import TextIO

from ..common.redact import for_text, mask
from ..load.document import Mapping, Node, Scalar, Sequence
from ..common.vocabulary import ALIASES, CONCEPTS, normalise_key

# Generic synonyms of the trade, folded to one word before names are compared. Phrases first.
PHRASES = {
    "learning_rate": "lr", "step_size": "lr", "stepsize": "lr", "top_p": "topp", "top_k": "topk",
    "time_limit": "timeout", "world_size": "world", "group_size": "group",
}
_SYN_GROUPS = {
    "completion": "answer answers completion completions response responses sample samples generation "
                  "generations rollout rollouts output outputs candidate candidates",
    "prompt": "prompt prompts question questions query queries problem problems",
    "temperature": "temperature temp",
    "kl": "kl divergence kld",
    "coef": "coef coeff coefficient weight scale",
    "clip": "clip clipping clamp",
    "eps": "eps epsilon range band",
    "high": "high upper hi",
    "low": "low lower lo",
    "reference": "reference ref frozen",
    "model": "model weights checkpoint_path",
    "grad": "grad gradient gradients",
    "max": "max maximum limit cap",
    "warmup": "warmup warm",
    "step": "step steps iter iters iteration iterations",
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
    "estimator": "estimator algorithm algo objective method",
    "critic": "critic value",
    "reward": "reward rewards scorer scorers grader graders verifier verifiers",
    "context": "context ctx window seq sequence",
    "tensor": "tensor tp",
    "pipeline": "pipeline pp",
    "per": "per each",
}
SYNONYMS = {w: canon for canon, words in _SYN_GROUPS.items() for w in words.split()}
WEAK = frozenset({"per", "max", "total"})  # words that say nothing on their own
UNIT_WORDS = {"length": "tokens"}  # a key with this word counts in this unit (and a concept in it has it)
STOP = frozenset("size num n number count of the in a an for to is use do".split())

# Extra generic words of a concept's meaning that its aliases do not carry.
EXTRA_WORDS = {
    "batch.mini": "update_batch optimizer_batch",
    "batch.micro_per_gpu": "batch_per_gpu forward_batch",
    "optim.epochs": "epochs passes",
    "rollout.temperature": "temperature",
    "kl.coef": "kl_coef",
    "reference.source": "reference_model frozen_model",
}

# Words of the sections a concept's area is usually written under.
AREA_WORDS = {
    "run": "run experiment recipe algo algorithm job",
    "cluster": "cluster launch launcher resources hardware distributed infra",
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

MIN_NAME = 0.4  # the least name overlap (Dice) that counts as name evidence
LIVE_MARGIN = 1.0  # a live line leads every other candidate by at least this score
W_NAME, W_SECTION, W_RANGE, W_RANGE_OUT, W_ENUM = 3.0, 1.5, 1.0, -2.0, 3.0


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
    a section condition counts only under that section, as in the alias table)."""
    best, which = 0.0, None
    for n in concept_names()[concept]:
        if n.under and (not parents or parents[-1] not in n.under):
            continue
        if n.not_under and any(p in n.not_under for p in parents):
            continue
        shared = leaf_words & n.words
        if not shared - WEAK:
            continue
        hit = len(shared)
        dice = 2 * hit / (len(leaf_words) + len(n.words))
        if dice > best:
            best, which = dice, n
    return best, which


@dataclass
class Candidate:
    concept: str
    key: str
    node: Node
    score: float
    reasons: list[str]
    name: float = 0.0
    enum: bool = False
    strong: bool = False  # enough evidence for a live line (the enumeration, or a name with a section or two words)
    unit: tuple = ()  # (("per", "prompt"), ("scope", "gpu")) when the key's name says so

    def toml_value(self) -> str:
        if not self.unit:
            return _q(self.key)
        return "{ key = " + _q(self.key) + "".join(f", {k} = {_q(v)}" for k, v in self.unit) + " }"

    @property
    def line(self) -> int:
        return self.node.line


@dataclass
class Draft:
    path: str
    placed: dict[str, str] = field(default_factory=dict)  # concept -> key, as resolved today
    live: dict[str, Candidate] = field(default_factory=dict)  # concept -> the one confident candidate
    ambiguous: dict[str, list[Candidate]] = field(default_factory=dict)  # concept -> candidates to confirm
    absent: list[str] = field(default_factory=list)  # concepts with no candidate in the file
    unmatched: list[tuple[str, Node]] = field(default_factory=list)  # keys nothing placed or matched
    documents: int = 1

    def toml(self) -> str:
        lines = ["# Draft written by `trimtab map` for " + for_text(self.path) + ": confirm every line before you rely on it.",
                 "# In a trimtab.toml write the header as [keys].",
                 "[tool.trimtab.keys]"]
        for concept in sorted(self.live):
            c = self.live[concept]
            lines.extend("# " + n for n in _unit_note(concept))
            lines.append(f"{_q(concept)} = {c.toml_value()}  # {for_text('; '.join(c.reasons))}")
        for concept in sorted(self.ambiguous):
            cands = self.ambiguous[concept]
            lines.append(f"# {concept}: {'ambiguous, uncomment the right line' if len(cands) > 1 else 'confirm'} "
                         f"({CONCEPTS[concept].meaning})")
            lines.extend("# " + n for n in _unit_note(concept))
            for c in cands:
                lines.append(f"# {_q(concept)} = {c.toml_value()}  # {for_text('; '.join(c.reasons))}")
        return "\n".join(lines) + "\n"

    def report(self, out: TextIO, draft_to: str | None) -> None:
        docs = f" ({self.documents} documents)" if self.documents > 1 else ""
        out.write(f"{for_text(self.path)}{docs}: {len(self.placed)} concept(s) placed by the key map, the alias table or "
                  f"the native layout; {len(self.live) + len(self.ambiguous)} more have candidate keys.\n")
        if self.live or self.ambiguous:
            out.write("\nCould not place (candidates in this file, with why):\n")
            for concept in sorted(set(self.live) | set(self.ambiguous)):
                cands = [self.live[concept]] if concept in self.live else self.ambiguous[concept]
                state = "drafted" if concept in self.live else (
                    f"ambiguous: {len(cands)} candidates, left commented out" if len(cands) > 1
                    else "weak evidence: left commented out")
                out.write(f"  {concept} ({CONCEPTS[concept].meaning}): {state}\n")
                for c in cands:
                    out.write(f"      {for_text(c.key)}  line {c.line}: {_shown(c.node)}  -- "
                              f"{for_text('; '.join(c.reasons))}\n")
        if self.absent:
            out.write("\nNo candidate key in this file:\n")
            out.write(textwrap.fill(", ".join(self.absent), 96, initial_indent="  ", subsequent_indent="  ") + "\n")
        if self.unmatched:
            out.write("\nKeys no concept matched (not used by any rule):\n")
            text = ", ".join(f"{for_text(k)} (line {n.line})" for k, n in self.unmatched)
            out.write(textwrap.fill(text, 96, initial_indent="  ", subsequent_indent="  ") + "\n")
        if draft_to:
            out.write(f"\nDraft key map written to {for_text(draft_to)}.\n")
        else:
            out.write("\n" + self.toml())


def _q(text: str) -> str:
    return json.dumps(mask(text), ensure_ascii=False)


def _unit_note(concept: str) -> list[str]:
    c = CONCEPTS[concept]
    if not c.per:
        return []
    return [f"unit: {concept} counts {c.per}s, {'per GPU' if c.scope == 'gpu' else 'for the whole job'}; if the key "
            f"counts otherwise write {{ key = ..., per = \"prompt\"|\"completion\", scope = \"global\"|\"gpu\" }}"]


def _shown(node: Node) -> str:
    if isinstance(node, Scalar):
        text = mask(node.text)  # masked whole, then shortened: no part of a credential stays
        return for_text(text if len(text) <= 40 else text[:37] + "...")
    return f"<{node.kind}>"


# --- evidence -------------------------------------------------------------------------------------
def _kind(node: Node, version: str):
    if isinstance(node, Scalar):
        return node.value(version)
    return node


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
    value = _kind(node, version)
    if not _type_fits(value, concept):
        return None
    c = CONCEPTS[concept]
    leaf = path[-1]
    leaf_words = _fold(_split(leaf))
    parents = [normalise_key(p) for p in path[:-1] if not p.isdigit()]
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
    area_name = concept.split(".")[0]
    area = set(AREA_WORDS.get(area_name, "").split()) | {area_name}
    near = [p for p in parents if p in area or set(_split(p)) & area]
    section = 1.0 if near else 0.0
    if near:
        reasons.append(f"section '{near[-1]}' ~ {area_name}")
    total = W_NAME * name + W_SECTION * section
    enum = False
    if c.values and isinstance(value, str):
        enum = value.strip().lower() in c.values
        if enum:
            total += W_ENUM
            reasons.append(f"value '{value}' is one of the {concept} values")
        elif not name:
            return None  # an enumeration's concept needs its value or its name
    reasons.append(f"type {c.type}" if c.type != "any" else "type text or boolean")
    in_range = None
    bounds = RANGES.get(concept)
    if bounds is not None and isinstance(value, (int, float)) and not isinstance(value, bool):
        low, high = bounds
        in_range = low <= value <= high
        total += W_RANGE if in_range else W_RANGE_OUT
        reasons.append(f"{value!r} {'within' if in_range else 'outside'} the usual {low:g}..{high:g}")
    if not (name or enum or (section and in_range)):
        return None  # a section and a type alone are no evidence
    if total <= 0:
        return None
    words = len((leaf_words & which.words) - WEAK) if which is not None else 0
    strong = enum or (name >= 0.5 and (section or words >= 2))
    hint = _unit_hint(c, leaf_words)
    if hint:
        # the key's name says it counts in another unit: offered with that unit, for confirmation
        reasons.append("the name says " + ", ".join(f"{k} = {v}" for k, v in hint) + " (confirm)")
        strong = False
    return Candidate(concept, ".".join(path), node, total, reasons, name, enum, bool(strong), hint)


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
                if isinstance(v, Mapping):
                    stack.append((path + (name,), v))
                else:
                    yield path + (name,), v


def draft(runs, path: str) -> Draft:
    d = Draft(path, documents=len(runs) or 1)
    candidates: dict[tuple[str, str], Candidate] = {}
    taken: set[str] = set()
    for m in runs:
        for concept, v in m.values.items():
            if v.key:
                d.placed.setdefault(concept, v.key)
                taken.add(v.key)
    all_keys: dict[str, Node] = {}
    from ..compose.shell import runs_of

    for m in runs:
        roots = runs_of(m.doc)
        if not roots or m.index >= len(roots):
            continue
        root = roots[m.index]
        for p, node in _keys(root):
            key = ".".join(p)
            if key in taken or any(key.startswith(t + ".") for t in taken):
                continue
            all_keys.setdefault(key, node)
            found = [c for c in (score(concept, p, node, m.version) for concept in CONCEPTS
                                 if concept not in d.placed) if c is not None]
            if any(c.name or c.enum for c in found):
                # the name or the value points somewhere: section and range alone add only noise
                found = [c for c in found if c.name or c.enum]
            for c in found:
                prev = candidates.get((c.concept, key))
                if prev is None or c.score > prev.score:
                    candidates[(c.concept, key)] = c
    by_concept: dict[str, list[Candidate]] = {}
    by_key: dict[str, list[Candidate]] = {}
    for c in candidates.values():
        by_concept.setdefault(c.concept, []).append(c)
        by_key.setdefault(c.key, []).append(c)
    # Live lines: mutual best with a clear lead, taken one at a time from the strongest.
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
            if len(avail) > 1 and avail[1].score > top.score - LIVE_MARGIN:
                continue
            rivals = [c for c in by_key[top.key] if c.concept != concept and c.concept not in d.live]
            if any(r.score > top.score - LIVE_MARGIN for r in rivals):
                continue
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
    d.absent = [c for c in CONCEPTS if c not in d.placed and c not in d.live and c not in d.ambiguous]
    matched = {c.key for c in d.live.values()} | {c.key for cs in d.ambiguous.values() for c in cs}
    d.unmatched = sorted(((k, n) for k, n in all_keys.items() if k not in matched), key=lambda kn: kn[1].line)
    return d


def draft_command(outcome, output: str | None, out: TextIO, err: TextIO) -> int:
    """Draft the key map of the one file of a checked run (a pipeline Outcome with its models kept)."""
    from ..report.explain import not_checked, problems_of

    if not_checked(outcome, err):
        return 2
    shown = outcome.files[0][1]
    runs = outcome.models(shown)
    for p in problems_of(outcome, shown):
        err.write(for_text(p) + "\n")
    if not runs:
        err.write(f"trimtab: error: {for_text(shown)}: nothing to map (the file could not be read as YAML or JSON)\n")
        return 2
    d = draft(runs, shown)
    if output:
        from ..common.paths import write_atomic

        write_atomic(output, d.toml())
    d.report(out, output)
    return 0
