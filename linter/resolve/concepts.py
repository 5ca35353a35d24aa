"""Resolve: a document's tree -> RunModel, through the key map, the alias table and the native
layout, then derive the run arithmetic. Knows concepts, never rules."""
from __future__ import annotations

from typing import cast

from ..compose.nodes import Unknown
from ..load.document import Document, Mapping, Node, Scalar, Sequence
from ..common.findings import Location
from .arithmetic import Unit, settle
from .model import Component, RunModel, Unused, Value
from ..common.settings import KeySpec
from ..common.record import Record
from ..common.vocabulary import (ALIASES, CONCEPTS, ELSEWHERE, REWARD_FIELDS, RL_MARKERS, RL_MIN_MARKERS, SANDBOX,
                                 SECTION_WORDS, SWITCHES, Concept, evaluation_section, fits, normalise_key, section_word,
                                 share_of_run, switched_off, word_concept)


class ResolveOptions(Record):
    keys: dict[str, KeySpec]
    version: str
    force_rl: bool
    readers: tuple  # (glob, reader) from the settings, the first match wins
    stated: bool  # the settings name the reader (yaml_version written)

    def __init__(
            self, keys: dict[str, KeySpec] | None = None, version: str = "1.1", force_rl: bool = False,
            readers: tuple = (), stated: bool = False
    ) -> None:
        self.keys = {} if keys is None else keys
        self.version = version
        self.force_rl = force_rl
        self.readers = readers
        self.stated = stated

    _fields = ("keys", "version", "force_rl", "readers", "stated")  # repr, equality (common/record.py)


# Field words inside one reward component (generic).
_FIELD_WORDS = {
    "kind": ("kind", "type", "source_type"),
    "ref": ("ref", "function", "fn", "func", "callable", "path", "module", "import", "model", "model_path",
            "target", "entrypoint", "entry_point"),
    "weight": ("weight", "scale", "coef", "coefficient"),
    "revision": ("revision", "commit", "sha", "version_pin"),
    "endpoint": ("endpoint", "url", "uri", "address"),
    "timeout_s": ("timeout_s", "timeout", "timeout_seconds", "request_timeout"),
    "name": ("name", "id"),
}


def resolve(doc: Document, root: Node, opts: ResolveOptions, index: int = 0) -> RunModel:
    model = RunModel(doc=doc, index=index, version="1.2" if doc.fmt == "json" else opts.version,
                     readers=opts.readers, reader_named=opts.stated)
    # A composed run's root carries, per dotted key path, the places a value passed through.
    model.chains = getattr(root, "chains", None) or {}
    model.roles = getattr(root, "roles", None) or {}
    model.notes = list(getattr(root, "notes", None) or [])
    # perf: one walk, by section: a section's context (inside a reward list, its normalised parent
    # words, an evaluation block) is decided once, and only for a section holding a key that could
    # name a concept
    chains: dict[tuple, tuple] = {}  # key path -> the hops of the way it was reached (when there are any)
    native: dict[str, tuple[tuple, Node]] = {}  # a concept's own dotted name -> the last entry written there
    words = _WORDS
    if len(words) >= _MEMO_SIZE:
        words.clear()
    if _LEAVES_OF[0] != len(CONCEPTS):  # a plugin declared a concept since the leaves were found
        _LEAVES.clear()
        _LEAVES_OF[0] = len(CONCEPTS)
    sections_found = _sections(root, chains, native, words)
    taken: set[int] = set()
    mapped = set()
    for concept, spec in opts.keys.items():
        node = _at(root, spec.key)
        if node is None:
            continue  # this file does not use the mapped layout: aliases and native names apply
        mapped.add(concept)
        _store(model, concept, node, "keymap", spec.key, spec, chains.get(tuple(spec.key.split("."))))
        taken.add(id(node))
    candidates: dict[str, list[tuple[int, tuple, Node]]] = {}
    sources_key = tuple(opts.keys["reward.sources"].key.split(".")) if "reward.sources" in opts.keys else None
    # perf: most keys are no alias (_sections hands out only the entries that may name a concept); a
    # key's words and a section's context are worked out once per process (runs repeat them from
    # file to file), and a section's only for one holding an alias
    misshapen: dict[str, list[tuple[int, tuple, Node, str]]] = {}
    for section, entries, section_kl in sections_found:
        context = None
        for path, node, known in entries:
            if taken and id(node) in taken:
                continue
            if context is None:
                context = _context(section, sources_key)
                decided_here = context[4]
            if context[0]:
                break  # a reward-sources list: its keys are a component's fields (every entry)
            # perf: what the section makes of each of the key's aliases (_decide) is worked out once
            # per key and section context, not once per key written (~40% fewer alias checks)
            leaf = known[0]
            decided = decided_here.get(leaf)
            if decided is None:
                decided = decided_here[leaf] = _decide(known[1], context)
            matched = False
            if decided:
                shaped = isinstance(node, (Mapping, Sequence))  # perf: a scalar fits any concept's shape
                for concept, strength in decided:
                    if concept == "reward.sources" and isinstance(node, Scalar):
                        continue
                    shape = "" if not shaped or concept == "sandbox.kind" and isinstance(node, Mapping) else \
                        _shape(concept, node, leaf, model.reader(node)[0], synonyms=opts.keys.get(concept))
                    if shape == "section":
                        continue  # a section named like the concept holds keys, not its value
                    if concept in mapped:
                        model.unused.append(Unused(concept, ".".join(path), doc.loc(node),
                                                   f"the key map names {opts.keys[concept].key}", "keymap"))
                        continue
                    if strength is None:
                        continue  # the alias means something else in this section
                    if strength < 0:
                        model.unused.append(Unused(concept, ".".join(path), doc.loc(node),
                                                   f"in the evaluation section '{context[2]}'", "evaluation"))
                        continue
                    if shape:  # a value of the wrong shape: used only if no key of the right shape matches
                        misshapen.setdefault(concept, []).append((strength, path, node, shape))
                        continue
                    candidates.setdefault(concept, []).append((strength, path, node))
                    matched = True
            if not matched and (known[2] or section_kl) and context[2] is None:
                _by_words(leaf, path, node, context[1], candidates, mapped, model.reader(node)[0])
    for concept in CONCEPTS:
        if concept in mapped or concept in model.values:
            continue
        found = candidates.get(concept)
        if found:
            if len(found) == 1:  # perf: most concepts are matched by one key (nothing to weigh)
                _s, path, node = found[0]
            else:
                best = max(s for s, _p, _n in found)
                top = [(p, n) for s, p, n in found if s == best]
                distinct = {}
                for p, n in top:
                    # one node at two paths: a reference and its target; the referring path tells the story
                    if id(n) not in distinct or ".".join(p) in model.chains:
                        distinct[id(n)] = (p, n)
                if len(distinct) > 1:
                    model.ambiguous[concept] = [doc.loc(n, ".".join(p)) for p, n in distinct.values()]
                    for p, n in distinct.values():
                        model.unused.append(Unused(concept, ".".join(p), doc.loc(n), f"ambiguous: {len(distinct)} "
                                                   "keys match as closely; name one in [tool.trimtab.keys]",
                                                   "ambiguous"))
                    continue
                path, node = next(iter(distinct.values()))
                for s, p, n in found:
                    if s < best:
                        why = "in an evaluation section; the training run's" if s == 0 else \
                            "matches less closely than"
                        model.unused.append(Unused(concept, ".".join(p), doc.loc(n),
                                                   f"{why} {'.'.join(path)} is read", "lost"))
            if concept == "sandbox.kind" and isinstance(node, Mapping):
                continue  # the section itself; its fields resolve through "kind"/"type" aliases
            key = ".".join(path)
            via = "native" if key == concept else "alias"  # the concept's own path is the native layout
            _store(model, concept, node, via, key, None, chains.get(path), opts.keys.get(concept))
            continue
        hit = native.get(concept)
        if hit is not None:
            _store(model, concept, hit[1], "native", concept, None, chains.get(hit[0]), opts.keys.get(concept))
    for concept, wrong in misshapen.items():
        _misshapen(model, concept, wrong)
    for u in model.unused:
        if isinstance(u.node, (Mapping, Sequence)):
            _at_key(model, root, u)
    model.unusable = {u.concept for u in model.unused if u.kind == "shape"}
    settle(model)  # the run's arithmetic: counts in their concepts' units, derived quantities
    _liveness(model)
    markers = sum(1 for c in RL_MARKERS if c in model.values)
    model.is_rl = opts.force_rl or markers >= RL_MIN_MARKERS or "run.estimator" in model.values and markers >= 2
    return model


def _by_words(leaf: str, path: tuple, node: Node, parents: list[str], candidates: dict, mapped: set,
              version: str) -> None:
    """A KL key that names its place (loss or reward) and its role by its words, outside evaluation
    sections; taken only when its value has the concept's type (a switch true/false, a number)."""
    if any(p in ELSEWHERE for p in parents):
        return
    found = word_concept(leaf, parents[-1] if parents else "")
    if found is None or found[0] in mapped or not isinstance(node, Scalar):
        return
    concept, expected = found
    value = node.value(version)
    if value is None or _fits(value, expected):
        candidates.setdefault(concept, []).append((1, path, node))


def _liveness(model: RunModel) -> None:
    """Mark the concepts of a mechanism that a switch turns off as dead (vocabulary.SWITCHES): once,
    here, so that no rule reasons about a setting the trainer does not read. A dead switch kills
    nothing."""
    for sw in SWITCHES:
        v = model.values.get(sw.concept)
        if v is None or sw.concept in model.dead or not switched_off(sw, v.value):
            continue
        for c in sw.governs:
            if c in model.values and c not in model.dead:
                model.dead[c] = v


# How many times, in all, a section reached again through an alias may be walked again: aliased
# sections resolve at every place they are used, while a nested-alias document stays linear.
REVISIT_BUDGET = 500


def _sources_section(section: tuple, sources_key: tuple | None, memo: dict) -> bool:
    """Is ``section``, or a section above it, a reward-sources list (each answer memoised)?"""
    todo = []
    while section and section not in memo:
        todo.append(section)
        section = section[:-1]
    found = memo.get(section, False)
    for s in reversed(todo):  # the shallowest first
        if not found:
            found = sources_key is not None and s == sources_key or _names_sources(s)
        memo[s] = found
    return found


def _names_sources(section: tuple) -> bool:
    """Does the last key of ``section`` name the reward sources, given the sections above it?"""
    aliases = [a for a in ALIASES.get(normalise_key(section[-1]), ()) if a.concept == "reward.sources"]
    if not aliases:
        return False
    parents = [normalise_key(p) for p in section[:-1] if not p.isdigit()]
    for alias in aliases:
        if alias.not_under and any(p in alias.not_under for p in parents):
            continue
        if not alias.under or parents and parents[-1] in alias.under:
            return True
    return False


def _sections(root: Node, chains: dict, native: dict, words: dict) -> list[tuple[tuple, list, bool]]:
    """(section path, [(key path, node, known)...], KL word in the section's name) for every
    mapping, its entries in order, sections included, keeping only the entries whose key may name a
    concept: one with an alias or a KL word in its name or its section's (``known``: the key's
    (leaf, aliases, KL word in it, either), see ``_word``). Each section is walked once per path it
    is reached by, within REVISIT_BUDGET; cycles are never followed. Filled on the way, from every
    entry: ``chains`` (key path -> the hops that brought the entry to this path (``_hop_location``
    makes their related locations; perf: only for a value stored, 0.33% fewer instructions a check),
    when there are any: a ``<<`` merge key, or the key whose value is an alias of a node
    written elsewhere; a key path is reached one way only), ``native`` (a dotted key path that is a
    concept's own name -> the last entry written there) and ``words`` (a key as written -> known)."""
    seen: set[int] = set()
    budget = REVISIT_BUDGET
    out: list[tuple[tuple, list, bool]] = []
    stack: list[tuple[tuple, Node, tuple, frozenset, bool]] = [((), root, (), frozenset(), False)]
    while stack:
        path, node, chain, above, section_kl = stack.pop()
        if id(node) in seen:
            if budget <= 0 or id(node) in above:
                continue
            budget -= 1
        seen.add(id(node))
        if isinstance(node, Mapping):
            inner: frozenset | None = None  # the mappings above the sections below (made for a section that has any)
            entries = []
            # perf: the keys of this section whose key path is a concept's own dotted name, once per
            # section path (not a dotted name joined and looked up for every key; with the kept
            # entries handed on as they are, 0.25% fewer instructions a check)
            leaves = _LEAVES.get(path)
            if leaves is None:
                leaves = _native_leaves(path)
            merge_key = None  # perf: the hops of the entries one '<<' brings in, made once (not per entry)
            merged: tuple = ()
            for name, k, v, via in node.entries():
                if via is not None:
                    if via is not merge_key:
                        merge_key = via
                        merged = chain + ((via, path, None),)
                    hops = merged
                elif v.anchor and isinstance(k, Scalar) and k.path == path and v.path != path + (name,):
                    hops = chain + ((k, path + (name,), v.path),)
                else:
                    hops = chain
                known = words.get(name)
                if known is None:  # perf: _word, inline
                    known = words[name] = _known(name)
                if isinstance(v, Mapping):  # the sections below (the last one is walked first)
                    p = path + (name,)
                    if inner is None:
                        inner = above | {id(node)}
                    stack.append((p, v, hops, inner, known[2]))
                elif known[3] or section_kl or hops or name in leaves:
                    p = path + (name,)
                else:
                    continue  # perf: most entries: nothing to keep, no key path made
                if hops:
                    chains[p] = hops
                if name in leaves:
                    native[".".join(p)] = (p, v)
                if known[3] or section_kl:
                    entries.append((p, v, known))
            if entries:
                out.append((path, entries, section_kl))
    return out


# perf: answers kept across files (runs repeat their keys and sections), bounded: emptied when full,
# so memory stays flat over any number of files
_MEMO_SIZE = 4096
_WORDS: dict[str, tuple[str, tuple, bool, bool]] = {}  # a key as written -> _known
_CONTEXTS: dict[tuple, tuple] = {}  # (section, reward-sources key path) -> _context
_LEAVES: dict[tuple, frozenset[str]] = {}  # a section's key path -> _native_leaves
_LEAVES_OF = [0]  # how many concepts there were when _LEAVES was filled


def _known(name: str) -> tuple[str, tuple, bool, bool]:
    """(the normalised key, its aliases, whether it holds a KL word, whether it has either) of a key
    as written."""
    leaf = normalise_key(name)
    aliases = ALIASES.get(leaf, ())
    return leaf, aliases, "kl" in leaf, bool(aliases) or "kl" in leaf


def _word(name: str) -> tuple[str, tuple, bool, bool]:
    """``_known`` of a key as written, memoised."""
    known = _WORDS.get(name)
    if known is None:
        known = _WORDS[name] = _known(name)
    return known


def _native_leaves(section: tuple) -> frozenset[str]:
    """The keys of ``section`` whose dotted key path is a concept's own name (a key written with dots
    in its name included), memoised."""
    if len(_LEAVES) >= _MEMO_SIZE:
        _LEAVES.clear()
    prefix = ".".join(section) + "." if section else ""
    found = _LEAVES[section] = frozenset(c[len(prefix):] for c in CONCEPTS if c.startswith(prefix))
    return found


def _context(section: tuple, sources_key: tuple | None
             ) -> tuple[bool, list[str], str | None, frozenset[str], dict[str, tuple]]:
    """What decides how the keys of one section resolve: (is it inside a reward-sources list (its
    keys are a component's fields, not concepts of the run), the normalised words of its path, the
    evaluation block it is in or None, those words as a set, and per normalised key what the
    section makes of its aliases (``_decide``, filled as keys are met))."""
    hit = _CONTEXTS.get((section, sources_key))
    if hit is None:
        if len(_CONTEXTS) >= _MEMO_SIZE:
            _CONTEXTS.clear()
        parents = [section_word(normalise_key(p)) for p in section if not p.isdigit()]
        hit = _CONTEXTS[(section, sources_key)] = (
            _sources_section(section, sources_key, {}) if section else False, parents,
            evaluation_section(section), frozenset(parents), {})
    return hit


def _decide(aliases: tuple, context: tuple) -> tuple[tuple[str, int | None], ...]:
    """What a section (its ``context``) makes of a key's aliases, as far as the section decides it:
    (concept, strength) for each alias that may apply there, in order. Strength 2: the alias names
    the section it must be under and is; 1: an alias valid anywhere; 0: a sandbox key in an
    evaluation section; -1: another key in an evaluation section (not used); None: a section in
    which the word means something else (not used, unless the key map names the concept). What
    the value itself decides (its shape) and what the file decides (its key map) is left to resolve."""
    parents, in_eval, words = context[1], context[2], context[3]
    out: list[tuple[str, int | None]] = []
    for alias in aliases:
        if alias.under and (not parents or parents[-1] not in alias.under):
            continue
        concept = alias.concept
        if in_eval is not None:
            # an evaluation, validation or test block samples for another loop: its keys never
            # compete with the training run's. Only a sandbox (where generated code runs, in any
            # loop) is taken from one, and only when the training run states none.
            out.append((concept, 0 if concept.startswith("sandbox.") else -1))
        elif alias.not_under and not words.isdisjoint(alias.not_under):
            out.append((concept, None))
        else:
            out.append((concept, 2 if alias.under else 1))
    return tuple(out)


def _at(root: Node, key: str) -> Node | None:
    """The node at a dotted key path (list items by index); a flat key written with dots in its
    name (``"batch.mini": 96``) is found too."""
    if isinstance(root, Mapping):
        flat = root.get(key)
        if flat is not None:
            return flat
    node = root
    for part in key.split("."):
        if isinstance(node, Mapping):
            node = node.get(part)
        elif isinstance(node, Sequence) and part.isdigit() and int(part) < len(node.items):
            node = node.items[int(part)]
        else:
            return None
        if node is None:
            return None
    return node


_EXPECTED = {"int": "a whole number", "number": "a number", "bool": "true or false", "str": "a word or text"}


def _shape(concept: str, node: Node, leaf: str, version: str, named: bool = False,
           synonyms: KeySpec | None = None) -> str:
    """How a value's shape fits its concept: "" when it fits (or is a list trimtab understands, see
    ``_combined``); "section" for a mapping that holds keys rather than the concept's value (found
    by an alias word that is also a section word, or standing for a word or a switch); otherwise
    the reason the value cannot be used. ``named``: the key map names the key, so a mapping there
    is the value, never a section.

    A one-element list of a number (``group_size: [8]``) is not read as the number: a trainer may
    read a list as one value per stage, dataset or worker, or refuse it, so the number trimtab
    would compute with is a guess; it is reported (VOC-2) instead."""
    if not isinstance(node, (Mapping, Sequence)):
        return ""
    c = CONCEPTS[concept]
    if c.type in ("list", "any"):
        return ""
    expected = _EXPECTED.get(c.type, c.type)
    if isinstance(node, Mapping):
        if not named and (c.type in ("str", "bool") or leaf in SECTION_WORDS):
            return "section"
        return f"a mapping where {expected} is expected"
    if _combined(c, node, version, synonyms) is not None or _counted(c, leaf, node) is not None:
        return ""
    return f"a list where {expected} is expected"


# Plain plural nouns whose list is the things themselves (``gpus: [0, 1, 2, 3]``, ``nodes: [a, b]``).
_COUNTED_WORDS = frozenset({"nodes", "gpus", "hosts", "devices"})


def _counted(c: Concept, leaf: str, node: Node) -> int | None:
    """A list of the things a count counts, written at a key that is their plain plural noun:
    the list's length is the count (``gpus: [0, 1, 2, 3]`` is 4 GPUs). None otherwise."""
    if c.unit not in ("nodes", "GPUs") or leaf not in _COUNTED_WORDS or not isinstance(node, Sequence):
        return None
    if not node.items or not all(isinstance(it, Scalar) for it in node.items):
        return None
    return len(node.items)


def _combined(c: Concept, node: Node, version: str, synonyms: KeySpec | None = None) -> str | None:
    """A list of an enumeration's values read as one value: all of the parts that the enumeration
    names together as "both" (``placement: [loss, reward]`` is both) or one of them alone
    (``[loss]``); None for any other list. Each item may be a value synonym of the key map."""
    if "both" not in c.values or not isinstance(node, Sequence) or not node.items:
        return None
    words = set()
    for item in node.items:
        value = item.value(version) if isinstance(item, Scalar) else None
        meant = synonyms.meaning(value) if synonyms is not None else None
        value = meant if meant is not None else value
        if not isinstance(value, str):
            return None
        words.add(value.strip().lower())
    parts = set(c.values) - {"both", "none"}
    if not words <= parts:
        return None
    return "both" if words == parts else next(iter(words))


def _at_key(model: RunModel, root: Node, u: Unused) -> None:
    """A block list or mapping is reported at its key's line (the value starts on the next one)."""
    parent, _dot, name = u.key.rpartition(".")
    holder = _at(root, parent) if parent else root
    if not isinstance(holder, Mapping):
        return
    for word, k, v, _via in holder.entries():
        if word == name and v is u.node and isinstance(k, Scalar) and k.line < u.node.line:
            loc = model.doc.loc(k)
            u.location = Location(loc.path, loc.line, loc.col, loc.end_line, loc.end_col, "", u.key)
            return


def _compact(node: Node, version: str, width: int = 40) -> str:
    """A list or mapping in short, as written (``[8]``, ``{low, high}``)."""
    if isinstance(node, Sequence):
        text = "[" + ", ".join(it.text if isinstance(it, Scalar) else f"<{it.kind}>" for it in node.items[:8]) + \
            (", ..." if len(node.items) > 8 else "") + "]"
    elif isinstance(node, Mapping):
        names = [n for n, _k, _v, _via in node.entries()]
        text = "{" + ", ".join(names[:8]) + (", ..." if len(names) > 8 else "") + "}"
    else:
        return str(scalar_value(node, version))
    return text if len(text) <= width else text[:width - 3] + "..."


def _misshapen(model: RunModel, concept: str, wrong: list[tuple[int, tuple, Node, str]]) -> None:
    """The keys that matched ``concept`` with a value of the wrong shape: when another key gave
    the concept its value (or several did, ambiguously), they are listed as not used; otherwise
    the closest ones are reported (VOC-2) rather than dropped in silence."""
    used = model.values.get(concept)
    reported = {u.key for u in model.unused if u.kind == "shape" and u.concept == concept}
    best = max(s for s, _p, _n, _why in wrong)
    for s, path, node, why in wrong:
        key = ".".join(path)
        if key in reported:
            continue  # the concept's own dotted path: reported when it was read
        loc = model.doc.loc(node)
        shown = _compact(node, model.reader(node)[0])
        if used is not None:
            model.unused.append(Unused(concept, key, loc, f"{why}; {concept} is read from {used.key}", "lost", shown,
                                       node))
        elif concept in model.ambiguous or concept in model.unknown or reported or s < best:
            model.unused.append(Unused(concept, key, loc, f"{why}; not used", "lost", shown, node))
        else:
            model.unused.append(Unused(concept, key, loc, why, "shape", shown, node))


def scalar_value(node: Node, version: str):
    if isinstance(node, Scalar):
        return node.value(version)
    return node


def _store(model: RunModel, concept: str, node: Node, via: str, key: str, spec: KeySpec | None = None,
           chain: tuple | list | None = None, synonyms: KeySpec | None = None):
    """Store one concept's value. ``synonyms``: the key map's entry for the concept when the value
    was found elsewhere than its mapped key (its ``values`` table still says what a value means)."""
    _store_value(model, concept, node, via, key, spec, synonyms or spec)
    if not chain:
        return
    v = model.values.get(concept)
    if v is not None and v.node is node:
        # a value written elsewhere (at an anchor) and reached through merges or aliases points
        # at the anchor's line; each hop (the '<<' or the key holding the alias) is a related location
        for hop in chain:
            loc = _hop_location(hop)
            if loc not in v.chain:
                v.chain.append(loc)


def _hop_location(hop: tuple) -> Location:
    """The related location of a hop as _sections notes it: (merge key, the mapping's key path, None)
    or (the key holding an alias, its key path, the alias target's key path)."""
    key, path, target = hop
    if target is None:
        return key.location(f"merged into {'.'.join(path) or 'the top level'} by '<<' here")
    return key.location(f"{'.'.join(path)} is an alias of {'.'.join(target) or 'the top level'}")


def _keyed_loc(node: Node, key: str, keyed: bool) -> Location:
    """Where a value was written, known by ``key`` when ``keyed`` (as ``Value.location`` makes it)."""
    return Value("", None, None, node, key=key, keyed=keyed).location


def _chain(model: RunModel, key: str) -> list[Location]:
    return list(model.chains.get(key, ())) if model.chains else []


def _store_value(model: RunModel, concept: str, node: Node, via: str, key: str, spec: KeySpec | None,
                 synonyms: KeySpec | None = None):
    # a value reached through a reference: written at the target's line, known by the key that refers
    # to it. perf: its Location is made when first read (Value.location), most never are
    chains = model.chains
    keyed = bool(chains and key)
    chain = list(chains.get(key, ())) if chains else []  # perf: _chain, inline
    if concept == "reward.sources":
        model.values[concept] = Value(concept, node, None, node, via, key, chain, keyed=keyed)
        model.components = _components(model, node, spec, key)
        return
    if isinstance(node, (Mapping, Sequence)):
        c = CONCEPTS[concept]
        if c.type == "any":
            inner = _source_field(node)
            if inner is not None:
                # a model's section: its path says what is loaded (a null path is no model named)
                _store_value(model, concept, inner[1], via, f"{key}.{inner[0]}" if key else inner[0], spec, synonyms)
                return
            model.values[concept] = Value(concept, True, None, node, via, key, chain, raw=node, keyed=keyed)
            return
        combined = _combined(c, node, model.reader(node)[0], synonyms)
        if combined is not None:  # a list that names one value of an enumeration (placement: [loss, reward])
            shown = _compact(node, model.reader(node)[0])
            model.values[concept] = Value(concept, combined, None, node, via, key, chain,
                                          note=f"the list {shown} read as {combined}", raw=shown, keyed=keyed)
            return
        leaf = normalise_key(key.rsplit(".", 1)[-1])
        count = _counted(c, leaf, node)
        if count is not None:  # the list of the things themselves (gpus: [0, 1, 2, 3])
            shown = _compact(node, model.reader(node)[0])
            model.values[concept] = Value(concept, count, None, node, via, key, chain,
                                          note=f"the list {shown} counted: {count}", raw=count, keyed=keyed)
            return
        why = _shape(concept, node, leaf, model.reader(node)[0], named=via == "keymap", synonyms=synonyms)
        if why and why != "section" and c.type != "list":
            model.unused.append(Unused(concept, key, _keyed_loc(node, key, keyed), why, "shape",
                                      _compact(node, model.reader(node)[0]), node))
        return
    if isinstance(node, Unknown):  # known only at launch: out of the run, never reasoned about
        model.unknown[concept] = Value(concept, None, None, node, via, key, chain, note=node.why, keyed=keyed)
        return
    value = model.read(node)
    # perf: the Value's fields given by position (by keyword: ~0.4 us more a value, ~62,000 values a
    # pass over the 2,000-file benchmark corpus)
    v = Value(concept, value, None, node, via, key, chain, (), "", value, None, keyed)
    c = CONCEPTS[concept]
    if spec is not None or synonyms is not None:
        if spec is not None and (spec.per or spec.scope):
            v.note = f"key map: per {spec.per or 'completion'}, {spec.scope or 'global'}"
        meant = synonyms.meaning(value) if synonyms is not None else None
        if meant is not None:
            # a value synonym of the key map: the concept takes the value it stands for; the node (and
            # so every location and the raw value) still shows what is written
            v.value = meant
            v.note = f"key map: {cast(Scalar, node).text.strip()} means {meant}"
        if spec is not None and c.per:
            v.unit = Unit(spec.per or c.per, spec.scope or c.scope)  # the key map states the unit
    model.values[concept] = v
    expected = c.type
    if c.share and share_of_run(concept, v.value):  # perf: most concepts are no share
        v.note = f"a share of the run: {v.value:g} of the total steps"
    elif v.value is not None and not _fits(v.value, expected):
        model.mistyped.append((v, expected))


# Words of the field that names what a model section loads (generic).
_SOURCE_WORDS = ("path", "model_path", "source", "name_or_path", "model_name_or_path", "model_name", "name")


def _source_field(node: Node) -> tuple[str, Node] | None:
    """(word, node) of the field of a model section that names its weights, or None."""
    if not isinstance(node, Mapping):
        return None
    for word, _k, sub, _via in node.entries():
        if normalise_key(word) in _SOURCE_WORDS and isinstance(sub, (Scalar, Unknown)):
            return word, sub
    return None


def _fits(value, expected: str) -> bool:
    # perf: a value of the plain type the concept names fits without asking vocabulary.fits
    plain = _PLAIN_TYPES.get(expected)
    if plain is None:
        return True
    return type(value) in plain or fits(value, expected)


_PLAIN_TYPES = {"int": (int,), "number": (int, float), "bool": (bool,), "str": (str,)}


def _components(model: RunModel, node: Node, spec: KeySpec | None, key: str = "") -> list[Component]:
    doc = model.doc
    chains = model.chains
    names = dict(spec.fields) if spec and spec.fields else {}
    out: list[Component] = []
    # (name, component, its key path below the list, the component's entries when already read)
    items: list[tuple[Node | None, Node, str, list | None]]
    if isinstance(node, Sequence):
        items = [_one_entry(it, names, str(i)) for i, it in enumerate(node.items)]
    elif isinstance(node, Mapping):
        items = [(k, v, k.text if isinstance(k, Scalar) else str(i), None)
                 for i, (_n, k, v, _via) in enumerate(node.entries())]
    else:
        return out
    for i, (name_node, item, below, read) in enumerate(items):
        comp = Component(i, doc.loc(item))
        at = f"{key}.{below}"
        if name_node is not None:
            comp.fields["name"] = Value("name", name_node.text if isinstance(name_node, Scalar) else "?",
                                        None, name_node, "component")
            comp.location = doc.loc(name_node)
        if isinstance(item, Scalar):
            val = model.read(item)
            if name_node is not None and isinstance(val, (int, float)) and not isinstance(val, bool):
                # a mapping of name -> weight: the name is the reward, the number its weight
                comp.fields["weight"] = Value("weight", val, None, item, "component",
                                              chain=_chain(model, at))
            else:
                comp.fields["ref"] = Value("ref", val, None, item, "component", chain=_chain(model, at))
        elif isinstance(item, Mapping):
            # perf: the component's entries are read once, for its sandbox, its switch and its fields
            # (and for a list item, once with _one_entry)
            entries = read if read is not None else list(item.entries())
            _component_sandbox(model, comp, entries)
            at_word = {}  # a key as written -> its value (as Mapping.get finds it)
            for word, _k, sub, _via in entries:
                at_word[word] = sub
                aliases = _word(word)[1]
                # a component's own remote-code switch
                if aliases and isinstance(sub, Scalar) and any(a.concept == "model.trust_remote_code"
                                                               for a in aliases):
                    comp.fields["trust_remote_code"] = Value("trust_remote_code", model.read(sub),
                                                             None, sub, "component", word)
            for field_name in REWARD_FIELDS:
                words = (names[field_name],) if field_name in names else _FIELD_WORDS[field_name]
                for w in words:
                    sub = at_word.get(w)
                    if sub is not None:
                        val = model.read(sub) if isinstance(sub, Scalar) else sub
                        # perf: by position, and the chain's key made only for a run with chains
                        comp.fields[field_name] = Value(field_name, val, None, sub, "component", w,
                                                        _chain(model, f"{at}.{w}") if chains else [])
                        break
        named = comp.fields.get("name")
        if named is not None and not any(f in comp.fields for f in ("ref", "endpoint", "kind")):
            # a component known by its name alone: the name is the reference (a function by name,
            # or a model when it reads as a path or repository)
            comp.fields["ref"] = Value("ref", named.value, named.location, named.node, "component", named.key,
                                       named.chain)
        out.append(comp)
    return out


# The words of a component's own fields and sandbox: a one-entry mapping keyed by one is no named reward.
_NOT_A_NAME = frozenset(w for words in _FIELD_WORDS.values() for w in words) | frozenset(SANDBOX)


def _one_entry(item: Node, names: dict, at: str) -> tuple[Node | None, Node, str, list | None]:
    """A list item written as a one-entry mapping (``{accuracy: 1.0}``, ``{judge: team/model}``,
    ``{style: {kind: judge, ...}}``) whose key is no component field: the same as an entry of a
    mapping of name -> reward. Last: the item's entries when it is a mapping and the component itself."""
    if isinstance(item, Mapping):
        entries = list(item.entries())
        if len(entries) == 1:
            word, k, v, _via = entries[0]
            leaf = normalise_key(word)
            if isinstance(k, Scalar) and isinstance(v, (Scalar, Mapping)) and leaf not in _NOT_A_NAME and \
                    leaf not in names.values():
                return k, v, f"{at}.{k.text}", None
        return None, item, at, entries
    return None, item, at, None


def _component_sandbox(model: RunModel, comp: Component, entries: list) -> None:
    """A sandbox section inside one component (``entries``: the component mapping's): its fields
    become ``sandbox.*`` fields of the component (they describe where that component's code runs)."""
    for word, _k, sub, _via in entries:
        if _word(word)[0] not in SANDBOX:
            continue
        if isinstance(sub, Scalar):
            comp.fields["sandbox.kind"] = Value("sandbox.kind", model.read(sub), None, sub,
                                                "component", word)
            return
        if not isinstance(sub, Mapping):
            return
        for name, _kn, v, _via2 in sub.entries():
            if not isinstance(v, Scalar):
                continue
            for alias in ALIASES.get(normalise_key(name), ()):
                if alias.concept.startswith("sandbox.") and normalise_key(word) in alias.under:
                    comp.fields[alias.concept] = Value(alias.concept, model.read(v), None, v,
                                                       "component", f"{word}.{name}")
                    break
        return


