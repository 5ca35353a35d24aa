"""The run's arithmetic, computed once: every derived quantity of a run (world size, data-parallel
ranks, completions per step, mini-batches, updates, accumulation, micro-batches per rank, token
budget against each context) as a list of steps, each with its inputs (terms), their origins, its
unit and whether it divides.

The BAT, LEN and CLP rules, the ``trimtab explain`` table and the audit pictures all read these
steps; none computes a quantity of its own. Knows concepts, never key names; reads only a RunModel.

**Units by evidence.** A batch count whose unit is not stated (a key map, the concept's own name,
or the key's own words such as ``per_gpu`` or ``n_prompts`` state it) keeps every reading its words
allow: prompts or completions, per GPU or global. ``readings()`` lists them (the concept's own unit
first: what trimtab assumed before it weighed the evidence), ``of(model, reading)`` computes the
arithmetic under one, and ``judge()`` says which readings the file's own numbers support. A value
converted from the unit it was written in keeps both (``Term.written`` and ``Term.value``).
"""
from __future__ import annotations

from reprlib import recursive_repr
from itertools import product
from math import gcd
from typing import Any

from ..common.record import FrozenRecord, Record
from ..common.findings import Location
from .model import RunModel, Value, whole
from ..common.vocabulary import CONCEPTS, normalise_key

__all__ = ["PARALLEL", "Unit", "Term", "Step", "Arithmetic", "Verdict", "of", "readings", "judge", "settle",
           "settled", "sources", "where", "related", "remainder", "lcm", "near_multiples", "near_divisors",
           "either", "rows", "render", "keymap_line"]

PARALLEL = ("train.tensor_parallel", "train.pipeline_parallel", "train.context_parallel")
# The batch counts that have a unit of counting (prompts or completions) and a scope (per GPU or global).
COUNTED = ("batch.prompts", "batch.rollouts", "batch.mini", "batch.micro_per_gpu")
# The readings each counted concept admits when nothing states its unit (the concept's own first).
_ADMITS = {
    "batch.prompts": (("prompt",), ("global",)),
    "batch.rollouts": (("completion", "prompt"), ("global",)),
    "batch.mini": (("completion", "prompt"), ("global", "gpu")),
    "batch.micro_per_gpu": (("completion",), ("gpu", "global")),
}
# A key's own words that state its unit (generic words of the trade, matched on whole words).
_PROMPT_WORDS = frozenset({"prompt", "prompts", "question", "questions", "queries", "query"})
_COMPLETION_WORDS = frozenset({"completion", "completions", "rollouts", "sample", "samples", "response",
                               "responses", "sequence", "sequences", "generations", "trajectories"})
_GPU_WORDS = frozenset({"gpu", "device", "rank", "local", "worker"})
_GLOBAL_WORDS = frozenset({"global", "total"})


# --- small helpers shared by the rules' messages and suggestions ---------------------------------
def lcm(*numbers: int) -> int:
    out = 1
    for n in numbers:
        if n:
            out = out * n // gcd(out, n)
    return out


def remainder(total: int, part: int) -> str:
    """'1024 = 10 x 96 + 64'."""
    return f"{total} = {total // part} x {part} + {total % part}"


def near_multiples(x: int, unit: int, limit: int = 0) -> list[int]:
    """The multiples of ``unit`` nearest to ``x`` below and above it (positive, not ``x`` itself;
    at most ``limit`` when given)."""
    unit = max(1, unit)
    below = (x - 1) // unit * unit
    above = (x // unit + 1) * unit
    out = [m for m in (below, above) if m > 0 and m != x and (not limit or m <= limit)]
    return out


def near_divisors(n: int, x: int, unit: int = 1, budget: int = 100_000) -> list[int]:
    """The divisors of ``n`` that are multiples of ``unit`` nearest to ``x`` below and above it.

    The search walks outward from ``x`` over multiples of ``unit`` and gives up after ``budget``
    candidates each way (``n`` itself still counts above), so a huge count costs no time."""
    unit = max(1, unit)
    below = above = None
    k, steps = (x - 1) // unit, 0
    while k >= 1 and steps < budget:
        if n % (k * unit) == 0:
            below = k * unit
            break
        k, steps = k - 1, steps + 1
    k, steps = x // unit + 1, 0
    while k * unit <= n and steps < budget:
        if n % (k * unit) == 0:
            above = k * unit
            break
        k, steps = k + 1, steps + 1
    if above is None and n > x and n % unit == 0:
        above = n
    return [d for d in (below, above) if d is not None]


def either(values: list[int]) -> str:
    return " or ".join(str(v) for v in values)


def where(v: Value) -> str:
    """file:line of a stated value ('<command line>' for an override)."""
    loc = v.location
    if loc.path is None:
        return "<command line>"
    return f"{loc.path}:{loc.line}" if loc.line else loc.path


def sources(model: RunModel, concept: str) -> list[Value]:
    """The stated values a quantity rests on: itself when stated, else (recursively) the stated
    inputs of its derivation."""
    v = model.values.get(concept)
    if v is not None:
        return [v]
    d = model.derived.get(concept)
    if d is None:
        return []
    out: list[Value] = []
    for name in d.inputs:
        for s in sources(model, name):
            if s not in out:
                out.append(s)
    return out


def related(model: RunModel, *concepts: str, skip: tuple = ()) -> list:
    """Related locations for the stated inputs of ``concepts``, each with a short message."""
    out, seen = [], set()
    for c in concepts:
        for v in sources(model, c):
            if v.concept in skip or v.concept in seen:
                continue
            seen.add(v.concept)
            out.append(v.location.with_message(f"{v.concept} = {num(v.value)}" + (f" ({v.note})" if v.note else "")))
    return out


def num(value) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def fmt(value) -> str:
    """A computed quantity for a view: whole numbers as such, fractions to two places (10.67)."""
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() else f"{value:.2f}"
    return "?" if value is None else str(value)


# --- units ---------------------------------------------------------------------------------------
class Unit(FrozenRecord):
    """How a count is counted: per prompt or per completion, per GPU or over all ranks."""

    per: str  # prompt | completion
    scope: str  # global | gpu

    def __init__(self, per: str, scope: str) -> None:
        object.__setattr__(self, "per", per)
        object.__setattr__(self, "scope", scope)

    _fields = ("per", "scope")  # repr, equality and hash (common/record.py)

    def words(self) -> str:
        return f"{self.per}s, {'per GPU' if self.scope == 'gpu' else 'global'}"

    def noun(self, n=None) -> str:
        return self.per if n == 1 else f"{self.per}s"


def own_unit(concept: str) -> Unit | None:
    c = CONCEPTS.get(concept)
    if c is None or not c.per:
        return None
    # perf: a Unit is immutable, and there are four: each made once, not once a call (~15,000 calls
    # a run over the 2,000-file benchmark corpus)
    found = _UNITS.get((c.per, c.scope))
    if found is None:
        found = _UNITS[(c.per, c.scope)] = Unit(c.per, c.scope)
    return found


_UNITS: dict[tuple[str, str], Unit] = {}


def key_words(key: str) -> set[str]:
    """The whole words of a key path's last part (``micro_batch_size_per_gpu`` -> micro, batch, ...)."""
    leaf = normalise_key(key.rsplit(".", 1)[-1]) if key else ""
    return {w for w in leaf.replace("-", "_").split("_") if w}


def admissible(v: Value) -> tuple[Unit, ...]:
    """The units a stated count may be counted in, the first being the one read when nothing else
    decides: one unit when the key map, the concept's own name or the key's own words state it."""
    own = own_unit(v.concept)
    if own is None:
        return ()
    if v.unit is not None:
        return (v.unit,)
    if v.via != "alias" or v.key.replace("_", "") == v.concept.replace("_", ""):
        return (own,)  # the concept's own dotted name (native layout, --set): trimtab's own unit
    # perf: what a key's words admit is worked out once per key (runs repeat their keys; bounded)
    memo = (v.concept, v.key, own)
    found = _ADMISSIBLE.get(memo)
    if found is None:
        found = _admitted(v.concept, v.key, own)
        if len(_ADMISSIBLE) >= 1024:
            _ADMISSIBLE.clear()
        _ADMISSIBLE[memo] = found
    return found


_ADMISSIBLE: dict[tuple, tuple[Unit, ...]] = {}


def _admitted(concept: str, key: str, own: Unit) -> tuple[Unit, ...]:
    """The units a count stated under an alias key admits by the key's own words."""
    pers, scopes = _ADMITS[concept]
    words = key_words(key)
    if words & _PROMPT_WORDS:
        pers = ("prompt",)
    elif words & _COMPLETION_WORDS:
        pers = ("completion",)
    if words & _GPU_WORDS:
        scopes = ("gpu",)
    elif words & _GLOBAL_WORDS:
        scopes = ("global",)
    out = [Unit(p, s) for p in pers for s in scopes]
    out.sort(key=lambda u: (u != own,))
    return tuple(out)


Reading = tuple  # ((concept, Unit), ...) for the counts whose unit is not stated


def readings(model: RunModel) -> list[Reading]:
    """Every admissible reading of the run's counts (the first: each in its most usual unit)."""
    choices = []
    for c in COUNTED:
        v = model.values.get(c)
        written = None if v is None else v.raw if v.raw is not None else v.value
        if not isinstance(written, (int, float)) or isinstance(written, bool):
            continue  # not a number: VOC-2 reports it, and no reading of it can be computed
        units = admissible(v)
        if len(units) > 1:
            choices.append([(c, u) for u in units])
    if not choices:
        return [()]
    return [tuple(r) for r in product(*choices)]


def keymap_line(v: Value, unit: Unit) -> str:
    """The key-map line (README, "Settings and key maps") that states a key's unit."""
    return f'"{v.concept}" = {{ key = "{v.key}", per = "{unit.per}", scope = "{unit.scope}" }}'


# --- terms and steps -------------------------------------------------------------------------------
class Term(Record):
    """One input of the arithmetic: a stated value, converted to its concept's unit under the
    reading in force, or a quantity another step derived."""

    concept: str
    value: Any  # in the concept's own unit (None: unknown, or written in a unit that cannot be converted)
    source: Value | None  # the stated value (None: derived by ``step``)
    written: Any  # the number as written in the file
    read_as: Unit | None  # the unit it is written in, when the concept has one
    conversion: str  # "x group size 8 x 8 data-parallel ranks"
    missing: str  # what a conversion needed and did not have
    step: str  # for a derived quantity, the step that computed it
    ambiguous: bool  # depends on a count whose unit is not stated

    def __init__(
            self, concept: str, value: Any, source: Value | None = None, written: Any = None,
            read_as: Unit | None = None, conversion: str = "", missing: str = "", step: str = "",
            ambiguous: bool = False
    ) -> None:
        self.concept = concept
        self.value = value
        self.source = source
        self.written = written
        self.read_as = read_as
        self.conversion = conversion
        self.missing = missing
        self.step = step
        self.ambiguous = ambiguous

    # repr, equality (common/record.py)
    _fields = (
        "concept", "value", "source", "written", "read_as", "conversion", "missing", "step", "ambiguous",
    )

    @property
    def whole(self):
        return whole(self.value)

    @property
    def converted(self) -> bool:
        return bool(self.conversion)

    @property
    def location(self) -> Location | None:
        return self.source.location if self.source is not None else None

    def shown(self) -> str:
        """The value as the views show it: what is written beside what it means when they differ
        ("24 prompts = 192 completions")."""
        if self.converted and self.read_as is not None:
            own = own_unit(self.concept)
            head = f"{num(self.written)} {self.read_as.noun(self.written)}" + (
                " per GPU" if self.read_as.scope == "gpu" else "")
            if self.value is None:
                return f"{head} (not converted: {self.missing} unknown)"
            return f"{head} = {num(self.value)} {own.noun(self.value)}" + (" per GPU" if own.scope == "gpu" else "")
        return "?" if self.value is None else num(self.value)


class Step(Record):
    """One step of the run's arithmetic."""

    key: str  # world, replica, ranks, completions, prompts, mini, updates, per_rank, accum, ...
    title: str
    value: Any  # what the step computes (int, a float where it does not divide, or None)
    terms: list[Term]
    formula: str  # "64 x 16", "1024 / 96 x 2"
    unit: str
    divides: bool | None  # None: the step is no division, or an input is unknown
    remainder: int | None
    parts: int | None  # a division's whole quotient, also when it does not divide
    stated: Term | None  # the same quantity written in the file
    concept: str  # the concept the step derives
    excess: int | None  # token steps: by how much a budget exceeds its window (set only when it does)
    disputed: bool  # built on a stated value that disagrees with its own factors (reported upstream)

    def __init__(
            self, key: str, title: str, value: Any, terms: list[Term] | None = None, formula: str = "",
            unit: str = "", divides: bool | None = None, remainder: int | None = None, parts: int | None = None,
            stated: Term | None = None, concept: str = "", excess: int | None = None, disputed: bool = False
    ) -> None:
        self.key = key
        self.title = title
        self.value = value
        self.terms = [] if terms is None else terms
        self.formula = formula
        self.unit = unit
        self.divides = divides
        self.remainder = remainder
        self.parts = parts
        self.stated = stated
        self.concept = concept
        self.excess = excess
        self.disputed = disputed

    # repr, equality (common/record.py)
    _fields = (
        "key", "title", "value", "terms", "formula", "unit", "divides", "remainder", "parts", "stated",
        "concept", "excess", "disputed",
    )

    @property
    def known(self) -> bool:
        return self.value is not None or self.divides is False

    @property
    def agrees(self) -> bool | None:
        if self.stated is None or self.stated.whole is None or self.value is None or self.divides is False:
            return None
        if isinstance(self.value, float) and not self.value.is_integer():
            return None
        return self.stated.whole == self.value

    @property
    def broken(self) -> bool:
        return self.divides is False or self.agrees is False or self.excess is not None

    @property
    def ambiguous(self) -> bool:
        return any(t.ambiguous for t in self.terms) or (self.stated is not None and self.stated.ambiguous)

    def text(self) -> str:
        """The step in words, with its numbers: the same words in every view."""
        if self.divides is False and self.remainder is not None:
            return f"does not divide: {self.formula}"
        return f"{self.formula} = {fmt(self.value)}" if self.formula and self.value is not None else self.formula


class Arithmetic:
    """The steps of one run under one reading of its counts."""

    def __init__(self, model: RunModel, reading: Reading = ()):
        self.model = model
        self.reading = reading
        self.units = dict(reading)
        # perf: a stated value's term is made when first asked for (``term``), not for every value of
        # the run up front: the steps read fewer than half of a run's ~34 values (terms made in resolve
        # over the 2,000-file benchmark corpus: 79,000 to 32,000; resolve ~13% less CPU)
        self.terms: dict[str, Term] = {}
        self._values = dict(model.values)  # the stated values the terms are made from, as computed
        self.steps: dict[str, Step] = {}
        self._compute()

    # reading the result ---------------------------------------------------------------------------
    def term(self, concept: str) -> Term | None:
        """The term of a stated value (a count: as ``_count`` converted it), else None."""
        t = self.terms.get(concept)
        if t is None and concept not in COUNTED:
            t = self._stated(concept)
        return t

    def step(self, key: str) -> Step | None:
        return self.steps.get(key)

    def stated(self, concept: str):
        """A stated count as a positive whole number in its concept's unit, else None."""
        t = self.term(concept)
        return t.whole if t is not None and t.source is not None else None

    def value(self, concept: str):
        """The positive whole value later arithmetic may build on: the stated value, else the
        derived one; None when neither exists or a stated value and the value derived from its
        factors disagree (one rule reports the disagreement; nothing is built on it)."""
        t = self.term(concept)
        derived = self._derived.get(concept)
        if t is not None and t.source is not None:
            if t.whole is None:
                return None
            if derived is not None and derived.value is not None and whole(derived.value) != t.whole:
                return None
            return t.whole
        return whole(derived.value) if derived is not None else None

    def derived(self, concept: str) -> Step | None:
        return self._derived.get(concept)

    @property
    def broken(self) -> list[Step]:
        return [s for s in self.steps.values() if s.broken]

    def label(self) -> str:
        """The reading in words: 'actor.mini_batch_size in prompts, global'."""
        return "; ".join(f"{self.model.values[c].key} in {u.words()}" for c, u in self.reading) or "as stated"

    # computing -------------------------------------------------------------------------------------
    def _add(self, step: Step) -> Step:
        self.steps[step.key] = step
        if step.concept and step.value is not None and step.divides is not False and not step.disputed and (
                not isinstance(step.value, float) or step.value.is_integer()):
            self._derived[step.concept] = step
        return step

    def _stated(self, concept: str) -> Term | None:
        v = self._values.get(concept)
        if v is None:
            return None
        t = self.terms.get(concept)
        if t is None:
            t = self.terms[concept] = Term(concept, v.value, v, v.value)
        return t

    def _input(self, concept: str) -> Term | None:
        """The term for a concept: the stated one, else the derived one, else None."""
        t = self._stated(concept)
        if t is not None:
            return t
        d = self._derived.get(concept)
        if d is None:
            return None
        return Term(concept, d.value, None, step=d.key, ambiguous=d.ambiguous)

    def _compute(self) -> None:
        self._derived: dict[str, Step] = {}
        m, v = self.model, self.value
        # topology ---------------------------------------------------------------------------------
        nodes, gpn = self._stated("cluster.nodes"), self._stated("cluster.gpus_per_node")
        n, g = v("cluster.nodes"), v("cluster.gpus_per_node")
        if n is not None and g is not None:
            self._add(Step("world", "GPUs (world size)", n * g, [nodes, gpn], f"{n} x {g}", "GPUs",
                           stated=self._stated("cluster.world_size"), concept="cluster.world_size"))
        world = v("cluster.world_size")
        degrees = [(c, self._stated(c)) for c in PARALLEL if c in m.values]
        if world is not None and all(v(c) is not None for c, _t in degrees):
            par = 1
            for c, _t in degrees:
                par *= v(c)
            terms = [self._input("cluster.world_size")] + [t for _c, t in degrees]
            if degrees:
                self._add(Step("replica", "GPUs per model replica", par, [t for _c, t in degrees],
                               " x ".join(str(v(c)) for c, _t in degrees), "GPUs"))
            divides = world % par == 0 and par <= world
            text = f"{world} / {par}" if degrees else f"{world} GPUs, no model parallelism"
            self._add(Step("ranks", "data-parallel ranks", world // par if divides else None, terms,
                           text if divides else remainder(world, par), "ranks",
                           divides=divides if degrees else None, remainder=world % par if degrees else None,
                           parts=world // par if degrees else None,
                           stated=self._stated("train.data_parallel"), concept="train.data_parallel"))
        else:
            self._stated("train.data_parallel")
        rt = v("rollout.tensor_parallel")
        gpus_c = "rollout.gpus" if "rollout.gpus" in m.values else "cluster.world_size"
        gpus = v(gpus_c)
        if rt is not None and gpus is not None:
            k, r = divmod(gpus, rt)
            self._add(Step("engines", "rollout engine instances", k if not r and k else None,
                           [self._input(gpus_c), self._stated("rollout.tensor_parallel")],
                           f"{gpus} / {rt}" if not r else remainder(gpus, rt), "instances", divides=not r,
                           remainder=r, parts=k))
        # the counts, each in its concept's unit under this reading ----------------------------------
        group = self._stated("rollout.group_size")
        G, D = v("rollout.group_size"), v("train.data_parallel")
        for c in COUNTED:
            self._count(c, G, D)
        # batch ------------------------------------------------------------------------------------
        P = v("batch.prompts")
        prompts = self.terms.get("batch.prompts")
        if P is not None and G is not None:
            self._add(Step("completions", "completions per step", P * G, [prompts, group], f"{P} x {G}",
                           "completions", stated=self.terms.get("batch.rollouts"), concept="batch.rollouts"))
        R, disputed = v("batch.rollouts"), False
        if R is None and self.stated("batch.rollouts") is not None:
            # stated, but not what prompts x group size make: BAT-1 reports it; the steps below show
            # what the stated number would give, and no rule reports them again
            R, disputed = self.stated("batch.rollouts"), True
        if P is None and "batch.prompts" not in m.values and R is not None and G is not None:
            divides = R % G == 0
            self._add(Step("prompts", "prompts per step", R // G if divides else None,
                           [self._input("batch.rollouts"), group],
                           f"{R} / {G}" if divides else remainder(R, G), "prompts", divides=divides,
                           remainder=R % G, parts=R // G, concept="batch.prompts"))
        M = v("batch.mini")
        E = v("optim.epochs")
        epochs_ok = E is not None or "optim.epochs" not in m.values
        if R is not None and M is not None:
            k, r = divmod(R, M)
            self._add(Step("mini", "mini-batches per step", k if not r else None,
                           [self._input("batch.rollouts"), self.terms["batch.mini"]],
                           f"{R} / {M}" if not r else remainder(R, M), "mini-batches", divides=not r, remainder=r,
                           parts=k,
                           disputed=disputed))
            if epochs_ok:
                e = E or 1
                if not r:
                    value = R // M * e
                    formula = f"{R} / {M}" + (f" x {E} epoch{'s' if E != 1 else ''}" if E else " (1 epoch: none stated)")
                else:
                    value, formula = R * e / M, f"{R} / {M} x {e}"
                terms = [self._input("batch.rollouts"), self.terms["batch.mini"]]
                if E:
                    terms.append(self._stated("optim.epochs"))
                self._add(Step("updates", "updates per step", value, terms, formula, "updates",
                               stated=self._stated("optim.updates_per_step"), concept="optim.updates_per_step",
                               disputed=disputed))
        u = v("batch.micro_per_gpu")
        if M is not None and D is not None:
            k, r = divmod(M, D)
            self._add(Step("per_rank", "mini-batch per rank", k if not r else None,
                           [self.terms["batch.mini"], self._input("train.data_parallel")],
                           f"{M} / {D}" if not r else remainder(M, D), "completions", divides=not r, remainder=r,
                           parts=k))
            if u is not None:
                # a mini-batch drawn as micro-batches of u on each of D ranks: no judgement of its own
                # (per_rank and accum judge), the whole columns and what is left for the pictures
                k3, r3 = divmod(M, u * D)
                self._add(Step("lanes", "micro-batch columns of a mini-batch", k3 if not r3 else None,
                               [self.terms["batch.mini"], self.terms["batch.micro_per_gpu"],
                                self._input("train.data_parallel")],
                               f"{M} / ({u} x {D})" if not r3 else remainder(M, u * D), "micro-batches",
                               remainder=r3, parts=k3))
            A = self.stated("batch.grad_accum")
            if not r and u is not None:
                k2, r2 = divmod(k, u)
                self._add(Step("accum", "accumulation steps", k2 if not r2 else None,
                               [self.terms["batch.mini"], self.terms["batch.micro_per_gpu"],
                                self._input("train.data_parallel")],
                               f"{M} / ({u} x {D})" if not r2 else remainder(k, u), "micro-batches",
                               divides=not r2, remainder=r2, parts=k2,
                               stated=self._stated("batch.grad_accum"), concept="batch.grad_accum"))
            elif not r and A is not None:
                self._add(Step("accum_only", "micro-batch implied by the accumulation", k // A if k % A == 0 else None,
                               [self.terms["batch.mini"], self._input("train.data_parallel"),
                                self._stated("batch.grad_accum")],
                               f"{k} / {A}" if k % A == 0 else remainder(k, A), "completions",
                               divides=k % A == 0, remainder=k % A))
        if R is not None and u is not None and D is not None:
            per = R * (E or 1)
            k, r = divmod(per, u * D)
            ep = f" x {E} epoch{'s' if E != 1 else ''}" if E else ""
            self._add(Step("micro", "micro-batches per rank per step", k if not r else None,
                           [self._input("batch.rollouts"), self.terms["batch.micro_per_gpu"],
                            self._input("train.data_parallel")],
                           f"{R}{ep} / ({u} x {D} ranks)" if not r else remainder(per, u * D), "micro-batches",
                           divides=not r, remainder=r, parts=k, disputed=disputed))
        if R is not None and G is not None and G > 1 and not disputed:
            if D is not None and D > 1 and R % D == 0 and R % G == 0:
                share = R // D
                self._add(Step("groups_ranks", "groups on each rank", share // G if share % G == 0 else None,
                               [self._input("batch.rollouts"), self._input("train.data_parallel"), group],
                               f"{R} / {D} / {G}" if share % G == 0 else remainder(share, G), "groups",
                               divides=share % G == 0, remainder=share % G))
        if M is not None and G is not None and G > 1:
            self._add(Step("groups_mini", "groups in a mini-batch", M // G if M % G == 0 else None,
                           [self.terms["batch.mini"], group], f"{M} / {G}" if M % G == 0 else remainder(M, G),
                           "groups", divides=M % G == 0, remainder=M % G))
        self._tokens(None if disputed else R)

    def _count(self, c: str, G, D) -> None:
        """The term of a counted concept under this reading, converted from the unit it is written in."""
        v = self.model.values.get(c)
        if v is None:
            return
        own = own_unit(c)
        written = v.raw if v.raw is not None else v.value
        units = admissible(v)
        read_as = self.units.get(c) or (units[0] if units else own)
        t = self.terms[c] = Term(c, written, v, written, read_as, ambiguous=c in self.units)
        n = written if isinstance(written, (int, float)) and not isinstance(written, bool) else None
        if n is None or read_as is None or read_as == own:
            return
        top, bottom = 1, 1
        notes: list = []
        missing: list = []
        for differs, factor, needed, label, up in (
                (read_as.per != own.per, G, "the group size", f"group size {G}", own.per == "completion"),
                (read_as.scope != own.scope, D, "the data-parallel ranks", f"{D} data-parallel ranks",
                 own.scope == "global")):
            if not differs:
                continue
            if factor is None:
                missing.append(needed)
            elif up:
                top, notes = top * factor, notes + [f"x {label}"]
            else:
                bottom, notes = bottom * factor, notes + [f"/ {label}"]
        t.conversion = " ".join(notes) or "not converted"
        if missing:
            t.value, t.missing = None, " and ".join(missing)
            return
        total = n * top
        if isinstance(total, float) and total.is_integer():
            total = int(total)
        t.value = total // bottom if isinstance(total, int) and total % bottom == 0 else total / bottom

    def _tokens(self, R) -> None:
        p, r = self._length("length.prompt_max"), self._length("length.response_max")
        eng, mod = self._length("rollout.context_max"), self._length("model.context_max")
        pt, rt = self.term("length.prompt_max"), self.term("length.response_max")
        for key, title, limit in (("fit_engine", "prompt + response within the engine context", eng),
                                  ("fit_model", "prompt + response within the model context", mod)):
            if limit is None or r is None:
                continue
            lt = self.term("rollout.context_max" if key == "fit_engine" else "model.context_max")
            if p is not None:
                self._add(Step(key, title, p + r, [pt, rt, lt], f"{p} + {r}", "tokens",
                               excess=p + r - limit if p + r > limit else None))
            elif r >= limit:  # no prompt budget stated: a response that fills the window leaves none
                self._add(Step(key, title, r, [rt, lt], f"{r}", "tokens", excess=r - limit))
        if eng is not None and mod is not None:
            self._add(Step("engine_model", "engine context within the model context", eng,
                           [self.term("rollout.context_max"), self.term("model.context_max")], f"{eng}", "tokens",
                           excess=eng - mod if eng > mod else None))
        if R is not None and r is not None:
            self._add(Step("tokens_step", "tokens generated per step (at the budget)", R * r,
                           [self._input("batch.rollouts"), rt], f"{R} completions x {r} tokens", "tokens"))
            steps = self.value("schedule.total_steps")
            if steps is not None:
                self._add(Step("tokens_run", "tokens generated over the run (at the budget)", R * r * steps,
                               [self.steps["tokens_step"].terms[0], rt, self.term("schedule.total_steps")],
                               f"{R * r:,} x {steps} steps", "tokens"))

    def _length(self, c: str):
        t = self.term(c)
        return t.whole if t is not None else None


# --- one arithmetic per run and reading, and what the evidence supports -------------------------------
def of(model: RunModel, reading: Reading | None = None) -> Arithmetic:
    """The run's arithmetic under ``reading`` (default: the first, most usual one), computed once."""
    cache = model.__dict__.setdefault("_arithmetic", {})
    if reading is None:  # perf: the usual reading is worked out once (a reading is never None)
        found = cache.get(None)
        if found is not None:
            return found
    key = readings(model)[0] if reading is None else reading
    found = cache.get(key)
    if found is None:
        found = cache[key] = Arithmetic(model, key)
    if reading is None:
        cache[None] = found
    return found


def release(model: RunModel) -> None:
    """Drop the arithmetic kept on a run model once nothing will ask for it again. Each Arithmetic
    (and the verdict over them) refers back to its model: left in place, that cycle keeps the model,
    and through it the whole document tree, alive until the cyclic collector scans them all (perf)."""
    model.__dict__.pop("_arithmetic", None)
    model.__dict__.pop("_verdict", None)


def settled(model: RunModel, concept: str):
    """The positive whole value of a concept under the run's usual reading (see ``Arithmetic.value``)."""
    return of(model).value(concept)


class Verdict:
    """What the file's own numbers say about the readings of its counts.

    perf: ``judge`` works out the usual reading only; the other readings are computed when something
    asks for them (``considered``, or ``mute`` when the usual reading breaks). Most runs' usual reading
    does not break, and no rule then needs the others. On the 2,000-file benchmark corpus that leaves
    2,115 arithmetics of 3,795 to compute, and BAT-1 (which asks first) went from ~470 ms to ~140 ms."""

    arithmetic: Arithmetic  # the reading the rules report from (the usual one)

    def __init__(self, arithmetic: Arithmetic, considered: list[tuple[Arithmetic, str]], mute: bool = False) -> None:
        self.arithmetic = arithmetic
        self._considered = considered  # every reading with its status: consistent, broken, unknown
        self._mute: bool | None = mute  # the usual reading breaks but another is consistent (or cannot be ruled out)
        self._others: list[Reading] = []  # readings not worked out yet (``judge``)

    @classmethod
    def _lazy(cls, usual: Arithmetic, status: str, others: list[Reading]) -> "Verdict":
        verdict = cls(usual, [(usual, status)], False if status != "broken" or not others else None)
        verdict._others = others
        return verdict

    @property
    def considered(self) -> list[tuple[Arithmetic, str]]:
        if self._others:
            model, others = self.arithmetic.model, self._others
            self._others = []
            self._considered = self._considered + [(a, _status(a)) for a in (of(model, r) for r in others)]
        return self._considered

    @property
    def mute(self) -> bool:
        if self._mute is None:
            considered = self.considered
            self._mute = len(considered) > 1 and considered[0][1] == "broken" and any(
                s != "broken" for _a, s in considered)
        return self._mute

    @recursive_repr()
    def __repr__(self) -> str:
        return (f"{self.__class__.__qualname__}("
            f"arithmetic={self.arithmetic!r}, considered={self.considered!r}, mute={self.mute!r})")

    def __eq__(self, other) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return (self.arithmetic, self.considered, self.mute) == (other.arithmetic, other.considered, other.mute)

    __hash__ = None  # type: ignore[assignment]  # mutable and compared by value: unhashable

    @property
    def ambiguous(self) -> bool:
        return len(self._considered) + len(self._others) > 1

    def supported(self) -> list[Arithmetic]:
        return [a for a, s in self.considered if s == "consistent"]

    def reportable(self, step: Step | None) -> bool:
        """May a rule report this broken step at its own level?"""
        return step is not None and step.broken and not (self.mute and step.ambiguous)

    def suffix(self, step: Step | None = None) -> str:
        """Appended to a finding that holds under every reading of an unstated unit."""
        if not self.ambiguous or step is not None and not step.ambiguous:
            return ""
        model = self.arithmetic.model
        named = []
        for c, _u in self.arithmetic.reading:
            units = admissible(model.values[c])
            pers = " or ".join(dict.fromkeys(f"{u.per}s" for u in units))
            scopes = " or ".join(dict.fromkeys("per GPU" if u.scope == "gpu" else "global" for u in units))
            named.append(f"{model.values[c].key} ({pers}; {scopes})")
        return f" (the same under every reading of {', '.join(named)})"


def breaks(a: Arithmetic) -> list[str]:
    """What breaks under this reading, in words: a converted count that is no whole number, and every
    step that depends on an unstated unit and does not divide or disagrees with a stated value."""
    out = [f"{t.shown()} is no whole count" for t in a.terms.values()
           if t.ambiguous and t.converted and t.value is not None and t.whole is None]
    return out + [f"{s.title} {s.text()}" for s in a.steps.values() if s.broken and s.ambiguous]


def _status(a: Arithmetic) -> str:
    if not a.reading:
        # perf: under no reading of an unstated unit nothing is ambiguous (a term is ambiguous only as
        # a count read in a unit the reading chose, a step only through its terms): nothing breaks
        # below, nothing is missing (most runs: their counts' units are stated or plain)
        return "consistent"
    if breaks(a):
        return "broken"
    if any(t.missing for t in a.terms.values() if t.ambiguous):
        return "unknown"
    return "consistent"


def judge(model: RunModel) -> Verdict:
    """Evaluate every admissible reading. The rules report the usual reading's broken steps only
    when no reading is consistent; when the readings disagree, BAT-9 writes a note instead."""
    cache = model.__dict__.get("_verdict")
    if cache is not None:
        return cache
    found = readings(model)
    usual = of(model, found[0])
    verdict = model.__dict__["_verdict"] = Verdict._lazy(usual, _status(usual), found[1:])
    return verdict


def settle(model: RunModel) -> None:
    """After resolving: convert every count whose unit is stated into its concept's unit (the value
    as written stays in ``raw``, the conversion in ``note``), and record what the usual reading
    derives in ``model.derived``. Called once by ``resolve``."""
    a = of(model)
    for c in COUNTED:
        t, v = a.terms.get(c), model.values.get(c)
        if t is None or not t.conversion or c in a.units:
            continue
        written = f"{v.raw} as written (per {t.read_as.per}, {t.read_as.scope})"
        if t.value is None:
            v.value, v.note = None, f"{written}: not converted, {t.missing} unknown"
        else:
            v.value, v.note = t.value, f"{written} {t.conversion}"
    for s in a.steps.values():
        if not s.concept or s.concept not in a._derived:
            continue
        inputs = tuple(t.concept for t in s.terms if t is not None)
        at: Value | str = model.path
        for name in inputs:
            src = model.values.get(name) or model.derived.get(name)
            if src is not None:
                at = src
                break
        d = model.derived[s.concept] = Value(s.concept, s.value, None, None, "derived", "", inputs=inputs,
                                             note=s.formula)
        # perf: its location (the first stated input's) made when first read, most never are (with
        # concepts._fits' plain types: 0.30% fewer instructions a check)
        d.at = at


# --- the explain table ----------------------------------------------------------------------------------
def _origin(model: RunModel, a: Arithmetic, concept: str) -> str:
    v = model.values.get(concept)
    d = a.derived(concept)
    if v is not None:
        text = f"stated at {where(v)}"
        t = a.term(concept)
        if v.note:
            text += f" ({v.note})"
        elif t is not None and t.converted:
            text += f" (read as {t.read_as.words()}: {t.conversion})"
        if d is not None and t is not None and t.value is not None and num(d.value) != num(t.value):
            text += f"; but {d.formula} = {num(d.value)}"
        elif d is not None:
            text += f"; agrees with {d.formula}"
        return text
    if d is None:
        return ""
    inputs = ", ".join(f"{s.concept} {where(s)}" for s in sources(model, concept))
    return f"= {d.formula}; from {inputs}"


def world_conflict(a: Arithmetic) -> str:
    """'' or, when the stated world size disagrees with nodes x GPUs per node, that conflict in words
    (the data-parallel ranks then follow from whichever is right, so they are not known)."""
    t, d = a.term("cluster.world_size"), a.derived("cluster.world_size")
    if t is None or t.source is None or d is None or t.value is None or num(d.value) == num(t.value):
        return ""
    return (f"conflict: the world size is stated as {num(t.value)} at {where(t.source)}, but "
            f"{d.formula} = {num(d.value)}")


def missing(a: Arithmetic, *alternatives: tuple[str, ...]) -> str:
    """Exactly what is missing for a quantity that any one of ``alternatives`` (each a tuple of
    concepts) would give: per alternative, its concepts that were not found."""
    out = []
    for alt in alternatives:
        found = [c for c in alt if a.term(c) is not None or a.derived(c) is not None]
        lacking = [c for c in alt if c not in found]
        if "train.data_parallel" in lacking and world_conflict(a):
            lacking[lacking.index("train.data_parallel")] = f"train.data_parallel ({world_conflict(a)})"
        if lacking:
            out.append(", ".join(lacking) + (f" (found: {', '.join(found)})" if found else ""))
    return "; or ".join(out)


def _row(model: RunModel, a: Arithmetic, label: str, concept: str, *alternatives: tuple[str, ...]
         ) -> tuple[str, str, str]:
    t, d = a.term(concept), a.derived(concept)
    if t is None and d is None:
        return (label, "?", f"not found: {missing(a, (concept,), *alternatives)}")
    shown = t.shown() if t is not None else num(d.value)
    return (label, shown, _origin(model, a, concept))


def _division(label: str, s: Step | None) -> tuple[str, str, str] | None:
    if s is None:
        return None
    if s.divides is False:
        return (label, "-", f"does not divide: {s.formula}")
    return (label, num(s.value), f"= {s.formula}")


def rows(model: RunModel, a: Arithmetic | None = None) -> list[tuple[str, str, str]]:
    """(quantity, value, how it was derived or where its inputs came from) for the run's
    arithmetic; a quantity that does not divide shows the remainder."""
    a = a or of(model)
    out = [_row(model, a, "GPUs (world size)", "cluster.world_size", ("cluster.nodes", "cluster.gpus_per_node"))]
    rep = a.step("replica")
    if rep is not None:
        named = ", ".join(f"{t.concept} {where(t.source)}" for t in rep.terms)
        out.append(("GPUs per model replica", str(rep.value), f"= tensor x pipeline x context parallel; from {named}"))
    ranks = a.step("ranks")
    if ranks is not None and ranks.divides is False:
        out.append(("data-parallel ranks", "-", f"does not divide: {ranks.formula}"))
    elif world_conflict(a) and a.term("train.data_parallel") is None and a.derived("train.data_parallel") is None:
        out.append(("data-parallel ranks", "-", world_conflict(a)))
    else:
        out.append(_row(model, a, "data-parallel ranks", "train.data_parallel", ("cluster.world_size",)))
    row = _division("prompts per step", a.step("prompts"))
    out.append(row if row and row[1] == "-" else _row(model, a, "prompts per step", "batch.prompts"))
    out.append(_row(model, a, "group size (completions per prompt)", "rollout.group_size"))
    out.append(_row(model, a, "completions per step", "batch.rollouts", ("batch.prompts", "rollout.group_size")))
    out.append(_row(model, a, "mini-batch (completions per update)", "batch.mini"))
    row = _division("mini-batches per step", a.step("mini"))
    if row:
        out.append(row)
    out.append(_row(model, a, "epochs over each batch", "optim.epochs"))
    upd = a.step("updates")
    if upd is not None and a.step("mini").divides is False:
        out.append(("updates per step", "-", f"not whole: {upd.formula} = {fmt(upd.value)}"))
    elif upd is not None and upd.disputed:
        out.append(("updates per step", fmt(upd.value), f"= {upd.formula}, from the stated completions per step "
                                                          "(which prompts x group size do not give)"))
    else:
        out.append(_row(model, a, "updates per step", "optim.updates_per_step", ("batch.rollouts", "batch.mini")))
    out.append(_row(model, a, "micro-batch per GPU", "batch.micro_per_gpu"))
    row = _division("micro-batches per rank per step", a.step("micro"))
    if row:
        out.append(row)
    per_rank, acc = a.step("per_rank"), a.step("accum")
    if per_rank is not None and per_rank.divides is False:
        out.append(("accumulation steps (implied)", "-", f"does not divide: {per_rank.formula}"))
    elif acc is not None and acc.divides is False:
        out.append(("accumulation steps (implied)", "-", f"does not divide: {acc.formula}"))
    else:
        out.append(_row(model, a, "accumulation steps", "batch.grad_accum",
                        ("batch.mini", "batch.micro_per_gpu", "train.data_parallel")))
    out.append(_row(model, a, "response budget (tokens)", "length.response_max"))
    for key in ("fit_engine", "fit_model"):
        s = a.step(key)
        if s is not None:
            limit = s.terms[-1]
            verdict = f"exceeds {limit.concept} {num(limit.value)} by {s.excess}" if s.broken else \
                f"fits {limit.concept} {num(limit.value)}"
            out.append((s.title, num(s.value), f"= {s.formula}; {verdict}"))
    step = a.step("tokens_step")
    if step is not None:
        inputs = ", ".join(f"{v.concept} {where(v)}" for v in sources(model, "batch.rollouts")
                           + sources(model, "length.response_max"))
        out.append((step.title, f"{step.value:,}", f"= {step.formula}; from {inputs}"))
        run = a.step("tokens_run")
        if run is not None:
            out.append((run.title, f"{run.value:,}",
                        f"= {run.formula}; schedule.total_steps {where(model.values['schedule.total_steps'])}"))
        else:
            out.append(("tokens generated over the run (at the budget)", "?", "not found: schedule.total_steps"))
    return out


def reading_lines(model: RunModel) -> list[str]:
    """explain: the readings considered for counts whose unit is not stated, and which the file's
    own numbers support."""
    verdict = judge(model)
    if not verdict.ambiguous:
        return []
    out = ["", "Units by evidence (counts whose unit the file does not state):"]
    for c, _u in verdict.considered[0][0].reading:
        v = model.values[c]
        units = " or ".join(f"[{u.words()}]" for u in admissible(v))
        out.append(f"  {v.key} = {num(v.raw if v.raw is not None else v.value)} ({c}): read as {units}")
    for a, status in verdict.considered:
        why = {"consistent": "consistent",
               "unknown": "cannot tell: " + "; ".join(f"{t.concept} needs {t.missing}" for t in a.terms.values()
                                                      if t.missing and t.ambiguous),
               "broken": "breaks: " + "; ".join(breaks(a))}[status]
        out.append(f"  - {a.label()}: {why}")
    supported = verdict.supported()
    if len(supported) == 1 and len(verdict.considered) > 1:
        out.append("  The file's own numbers support: " + supported[0].label())
        out.append("  To settle it, add to the key map:")
        for c, u in supported[0].reading:
            out.append("    " + keymap_line(model.values[c], u))
    elif not supported:
        out.append("  No reading is consistent.")
    elif verdict.considered[0][1] == "consistent":
        out.append(f"  {len(supported)} readings are consistent, the usual one among them: the run is read as usual.")
    else:
        out.append(f"  {len(supported)} readings are consistent; the file's numbers do not decide between them.")
    return out


def render(model: RunModel) -> str:
    """The table as text for ``trimtab explain`` (empty when the run states no arithmetic)."""
    table = rows(model)
    lines = reading_lines(model)
    if all(value == "?" for _q, value, _h in table) and not lines:
        return ""
    qw = max(len(q) for q, _v, _h in table)
    vw = max(len(v) for _q, v, _h in table)
    out = ["", "Run arithmetic:"]
    for q, v, h in table:
        out.append(f"  {q:<{qw}}  {v:>{vw}}  {h}")
    return "\n".join(out + lines) + "\n"
