"""Helpers shared by the optimisation-settings rules (KL, CLP, ALG, OPT).

Only concept-level reasoning lives here: which estimators are clipped or critic-free, whether a
value means "off", where to point a finding about a value that is not written at all.
"""
from __future__ import annotations

import functools

from trimtab import Location
from trimtab.common.scalars import YAML_READERS, misreaders, same_value, typed
from trimtab.common.vocabulary import CONCEPTS, fits
from trimtab.common.vocabulary import CRITIC_FREE as _NO_CRITIC
from trimtab.load.document import Scalar  # perf: not through the package's lazy names

# Estimator families (values of run.estimator, lower case).
# Clipped policy-gradient objectives: PPO (Schulman et al. 2017, arXiv:1707.06347) and its GAE
# form; group-relative variants (arXiv:2402.03300; arXiv:2503.14476; the "dr_grpo" variant, Liu et
# al. 2025, arXiv:2503.20783, which keeps the clip; from memory); REINFORCE++ keeps the PPO clip
# (arXiv:2501.03262, from memory).
CLIPPED = frozenset({"ppo", "gae", "grpo", "dr_grpo", "dapo", "reinforce++"})
# Group-relative estimators: the baseline is computed from the other completions of the same prompt.
GROUP_RELATIVE = frozenset({"grpo", "dr_grpo", "dapo", "rloo"})
# Estimators that need no value model at all (group, leave-one-out, greedy or batch baselines),
# declared once in the vocabulary (their value-model settings are dead).
CRITIC_FREE = _NO_CRITIC
# Estimators whose advantages come from GAE over a learned value function.
GAE_BASED = frozenset({"ppo", "gae"})

_OFF_WORDS = frozenset({"", "none", "null", "off", "false", "no", "disabled", "disable", "0"})


def is_off(value) -> bool:
    """Does a written value mean "switched off / absent on purpose" (false, null, 'none', 0)?"""
    if value is None or value is False:
        return True
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return value == 0
    if isinstance(value, str):
        return value.strip().lower() in _OFF_WORDS
    return False


def shown(v) -> str:
    """A value as the user wrote it (the scalar's text), else a short rendering."""
    node = getattr(v, "node", None)
    if node is not None:
        text = getattr(node, "text", None)
        if isinstance(text, str) and text:
            return text
        if getattr(node, "kind", "") in ("mapping", "sequence"):
            raw = getattr(v, "raw", None)  # a list read as one value keeps its text in short ([loss, reward])
            return raw if isinstance(raw, str) and raw else f"a {node.kind}"
    value = getattr(v, "value", v)
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def num(x) -> str:
    """A number for a message: integers as integers, floats in their shortest form."""
    if isinstance(x, float):
        if x.is_integer() and abs(x) < 1e15:
            return str(int(x))
        return f"{x:g}"
    return str(x)


def estimator(model) -> str | None:
    return model.text("run.estimator")


def unresolved(model, concept: str) -> bool:
    """Stated, or matched ambiguously (VOC-1 reports it): either way, not "missing"."""
    return model.get(concept) is not None or concept in model.ambiguous


def clipped(model) -> bool:
    """A clipped policy-gradient run: a clipped estimator, or a ratio clip written in the file."""
    return estimator(model) in CLIPPED or any(model.get(c) is not None for c in ("clip.low", "clip.high",
                                                                                  "clip.dual"))


def anchor(model, *prefer: str, key_path: str = "") -> Location:
    """Where to report something that is not written: the first of ``prefer`` that is stated,
    else the first line of the file. ``key_path`` names the missing concept (for the fingerprint)."""
    for c in prefer:
        v = model.values.get(c)
        if v is not None and v.location.line:
            loc = v.location
            return Location(loc.path, loc.line, loc.col, loc.end_line, loc.end_col, "", key_path or loc.key_path)
    return Location(model.path, 1, 1, 0, 0, "", key_path)


# The KL mechanisms a run can switch on: (switch, coefficient, where). The generic pair says nothing
# of where the term goes; the other two are a KL term added to the loss (arXiv:2402.03300) and a KL
# penalty subtracted from the reward (arXiv:2203.02155, from memory), each with its own switch and
# coefficient. KL is on when any of them is on.
KL_MECHANISMS = (("kl.enabled", "kl.coef", ""), ("kl.loss_enabled", "kl.loss_coef", "in the loss"),
                 ("kl.reward_enabled", "kl.reward_coef", "in the reward"))
KL_COEFS = tuple(c for _s, c, _w in KL_MECHANISMS)


def kl_mechanisms(model):
    """Each KL mechanism the file states: (state, Value, coefficient concept), state 'on' (a
    positive coefficient, its switch not off), 'off' (switched off, or a coefficient of 0), or
    'switched' (switched on, its coefficient left to the trainer). Dead values are not read.

    perf: worked out once per run (four KL rules ask) when no concept of the run is known only at
    launch or unusable: reading the run then has no effect on it (RunModel.get records what a rule
    asked for only when some are), so every rule would get the same answer."""
    if model.unknown or model.unusable:
        return _kl_mechanisms(model)
    memo = model.__dict__.get("_kl_mechanisms")
    if memo is None:
        memo = model.__dict__["_kl_mechanisms"] = tuple(_kl_mechanisms(model))
    return list(memo)


def _kl_mechanisms(model):
    out = []
    for switch, coef, _where in KL_MECHANISMS:
        s, c = model.values.get(switch), model.values.get(coef)
        if s is not None and s.value is False:
            out.append(("off", s, coef))
            continue
        if switch == "kl.enabled":
            placement = model.get("kl.placement")
            if placement is not None and isinstance(placement.value, str) and placement.value.strip().lower() == "none":
                out.append(("off", placement, coef))
                continue
        c = model.get(coef)
        if c is not None and c.number is not None:
            if c.number == 0:
                out.append(("off", c, coef))
            elif c.number > 0:
                out.append(("on", c, coef))
        elif s is not None and s.value is True and c is None and coef not in model.ambiguous:
            out.append(("switched", s, coef))
    return out


def kl_state(model):
    """('on', the coefficient of a mechanism that is on) | ('off', what switches KL off) |
    ('switched', a switch that is on with its coefficient unstated) | ('unstated', None).

    KL is off only when every mechanism the file states is off: a KL-in-reward coefficient of 0
    beside a KL term in the loss that is switched on is not "KL off"."""
    states = kl_mechanisms(model)
    for want in ("on", "switched", "off"):
        for state, v, _coef in states:
            if state == want:
                return state, v
    return "unstated", None


def misread(model, v) -> tuple[str, list[str], bool]:
    """(the reader of the file a concept's value was written in, the YAML readers that misread it
    (trimtab.common.scalars.misreaders), whether the settings name that reader). A quoted, tagged or
    structured value, and any value of a JSON file (JSON's own grammar), is misread by none."""
    node = v.node
    if not isinstance(node, Scalar) or node.style is not None or node.tag:
        return "", [], False
    reader, stated = model.reader(node)
    if reader == "json":
        return reader, [], stated
    c = CONCEPTS.get(v.concept)
    kind = c.type if c is not None else "any"
    if type(node) is Scalar:  # a scalar as written in a file (a value given elsewhere reads its own way)
        return reader, list(_plain_misreaders(node.text, reader if stated else None, kind)), stated
    return reader, _misreaders(node.value, reader if stated else None, kind), stated


def suspects(model) -> list:
    """(concept, Value) of the run's values that ``misread`` may find misread, sorted by concept: the
    others are provably misread by none (structured, quoted or tagged, or a plain scalar written in a
    file whose text every YAML reader reads alike).

    perf: YML-3 asked ``misread`` of every value of every run (64,000 calls on the 2,000-file
    benchmark corpus); most are plain words and numbers that every reader reads alike, and 107 are
    left. YML-3 went from ~300 ms to ~125 ms there (same machine, same load)."""
    out = []
    alike = _ALIKE
    for name, v in model.values.items():
        node = v.node
        if not isinstance(node, Scalar) or node.style is not None or node.tag:
            continue  # misread: misread by none
        if type(node) is Scalar:
            text = node.text
            if text and text[0] not in _NOT_TEXT_FIRST and text not in _WORDS:
                continue  # text under every reader (see _WORDS)
            same = alike.get(text)
            if same is None:
                same = _alike(text)
            if same:
                continue
        out.append((name, v))
    out.sort(key=_first)
    return out


def _first(pair):
    return pair[0]


# What a plain scalar must begin with, or be, to read as anything but its text under some YAML reader
# (trimtab.common.scalars): every pattern of type12, type11 and type11f other than these words begins
# with a digit, a sign, a point or '~' (or is empty). A text that neither begins so nor is one of them
# is the same text under every reader (tests/test_misread_filter.py checks it against the readers).
_NOT_TEXT_FIRST = frozenset("0123456789+-.~")
_WORDS = frozenset("null Null NULL true True TRUE false False FALSE yes Yes YES no No NO on On ON off Off OFF"
                   .split())
# perf: the other texts of plain scalars, each with whether the three YAML readers read it alike
# (bounded: emptied when full; only short texts are kept)
_ALIKE: dict[str, bool] = {}


def _alike(text: str) -> bool:
    """Do the YAML readers all read this plain, untagged text alike? Then ``misread`` finds no
    misreader for it, whatever the file's reader and the concept's type: ``scalars.misreaders``
    skips a reader whose reading every other reader shares, and ``_plain_misreaders`` reads the text
    the same way as here (``typed(text, True, None, version)``)."""
    if text.isdigit() and text.isascii() and (text[0] != "0" or len(text) == 1):
        same = True  # a decimal integer without a leading zero: the same under every reader
    else:
        first, *rest = (typed(text, True, None, r) for r in YAML_READERS)
        same = all(same_value(first, other) for other in rest)
    if len(text) <= 64:
        if len(_ALIKE) >= 4096:
            _ALIKE.clear()
        _ALIKE[text] = same
    return same


@functools.lru_cache(maxsize=1024)
def _plain_misreaders(text: str, reader: str | None, kind: str) -> tuple[str, ...]:
    """perf: the misreaders of a plain, untagged scalar written in a file depend on its text, the
    reader and the concept's type only; runs repeat them from file to file, so each is worked out
    once. The least recently used leave first: 1,024 entries keep the ones that repeat (as many hits
    as 4,096 on the benchmark corpus) and are full after a few hundred files, so the cache's memory
    does not grow with the number of files."""
    return tuple(_misreaders(lambda version: typed(text, True, None, version), reader, kind))


def _misreaders(read, reader: str | None, kind: str) -> list[str]:
    if kind in ("int", "number", "bool", "str"):
        def fit(x):
            return fits(x, kind)
    else:
        # a concept that takes a name or a switch (a path, or false for none): where one reader reads a
        # word as a boolean, null or number and another as text, the text is the misreading (no weights
        # are named 'off'); a date fits neither
        def fit(x):
            return not isinstance(x, str) and fits(x, kind)
    return misreaders(read, reader, fit)


def toml_key(text: str) -> str:
    """A value as written, as a TOML key of a key map's ``values`` table: bare when it can be, else a
    basic string."""
    bare = text and all(ch.isascii() and (ch.isalnum() or ch in "_-") for ch in text)
    return text if bare else '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'
