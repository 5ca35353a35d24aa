"""Resolve: a document's tree -> RunModel, through the key map, the alias table and the native
layout, then derive the run arithmetic. Knows concepts, never rules."""
from __future__ import annotations

from dataclasses import dataclass, field

from .document import Document, Mapping, Node, Scalar, Sequence
from .findings import Location
from .model import Component, RunModel, Value
from .vocabulary import ALIASES, CONCEPTS, REWARD_FIELDS, RL_MARKERS, RL_MIN_MARKERS, normalise_key


@dataclass(frozen=True)
class KeySpec:
    """Where the user's file keeps one concept, and in what unit."""

    key: str
    per: str = ""  # prompt | completion
    scope: str = ""  # global | gpu
    fields: tuple = ()  # for reward.sources: ((field, key in component), ...)


@dataclass
class ResolveOptions:
    keys: dict[str, KeySpec] = field(default_factory=dict)
    version: str = "1.1"
    force_rl: bool = False


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
    model = RunModel(doc=doc, index=index, version="1.2" if doc.fmt == "json" else opts.version)
    leaves = list(_leaves(root))
    taken: set[int] = set()
    mapped = set()
    for concept, spec in opts.keys.items():
        node = _at(root, spec.key)
        if node is None:
            continue  # this file does not use the mapped layout: aliases and native names apply
        mapped.add(concept)
        _store(model, concept, node, "keymap", spec.key, spec)
        taken.add(id(node))
    candidates: dict[str, list[tuple[int, tuple, Node]]] = {}
    # perf: most keys are no alias; their parent sections are normalised only for those that are,
    # once per section, and each key word once per file
    words: dict[str, str] = {}
    sections: dict[tuple, list[str]] = {}
    for path, node in leaves:
        if id(node) in taken:
            continue
        leaf = words.get(path[-1])
        if leaf is None:
            leaf = words[path[-1]] = normalise_key(path[-1])
        aliases = ALIASES.get(leaf)
        if not aliases:
            continue
        parents = sections.get(path[:-1])
        if parents is None:
            parents = sections[path[:-1]] = [normalise_key(p) for p in path[:-1] if not p.isdigit()]
        for alias in aliases:
            if alias.concept in mapped:
                continue
            if alias.not_under and any(p in alias.not_under for p in parents):
                continue
            if alias.under:
                if not parents or parents[-1] not in alias.under:
                    continue
                strength = 2
            else:
                strength = 1
            if alias.concept == "reward.sources" and isinstance(node, Scalar):
                continue
            if isinstance(node, (Mapping, Sequence)) and CONCEPTS[alias.concept].type not in ("list", "any"):
                if not (alias.concept == "sandbox.kind" and isinstance(node, Mapping)):
                    continue
            candidates.setdefault(alias.concept, []).append((strength, path, node))
    native = {".".join(p): (p, n) for p, n in leaves}
    for concept in CONCEPTS:
        if concept in mapped or concept in model.values:
            continue
        found = candidates.get(concept)
        if found:
            best = max(s for s, _p, _n in found)
            top = [(p, n) for s, p, n in found if s == best]
            distinct = {id(n): (p, n) for p, n in top}
            if len(distinct) > 1:
                model.ambiguous[concept] = [doc.loc(n, ".".join(p)) for p, n in distinct.values()]
                continue
            path, node = top[0]
            if concept == "sandbox.kind" and isinstance(node, Mapping):
                continue  # the section itself; its fields resolve through "kind"/"type" aliases
            _store(model, concept, node, "alias", ".".join(path))
            continue
        hit = native.get(concept)
        if hit is not None:
            _store(model, concept, hit[1], "native", concept)
    _convert_units(model, opts)
    derive(model)
    markers = sum(1 for c in RL_MARKERS if c in model.values)
    model.is_rl = opts.force_rl or markers >= RL_MIN_MARKERS or "run.estimator" in model.values and markers >= 2
    return model


def _leaves(root: Node):
    """(key path, node) for every mapping entry, sections included, each node once."""
    seen: set[int] = set()
    stack = [((), root)]
    while stack:
        path, node = stack.pop()
        if id(node) in seen:
            continue
        seen.add(id(node))
        if isinstance(node, Mapping):
            for name, _k, v, _via in node.entries():
                p = path + (name,)
                yield p, v
                if isinstance(v, Mapping):
                    stack.append((p, v))


def _at(root: Node, key: str) -> Node | None:
    node = root
    for part in key.split("."):
        if isinstance(node, Mapping):
            nxt = node.get(part)
            if nxt is None and "." not in part:
                nxt = None
            node = nxt
        elif isinstance(node, Sequence) and part.isdigit() and int(part) < len(node.items):
            node = node.items[int(part)]
        else:
            return None
        if node is None:
            # a flat dotted key written as one key
            return root.get(key) if isinstance(root, Mapping) else None
    return node


def scalar_value(node: Node, version: str):
    if isinstance(node, Scalar):
        return node.value(version)
    return node


def _store(model: RunModel, concept: str, node: Node, via: str, key: str, spec: KeySpec | None = None):
    doc = model.doc
    loc = doc.loc(node)
    if concept == "reward.sources":
        model.values[concept] = Value(concept, node, loc, node, via, key)
        model.components = _components(model, node, spec)
        return
    if isinstance(node, (Mapping, Sequence)):
        if CONCEPTS[concept].type == "any":
            model.values[concept] = Value(concept, True, loc, node, via, key, raw=node)
        return
    value = node.value(model.version)
    v = Value(concept, value, loc, node, via, key, raw=value)
    if spec is not None and (spec.per or spec.scope):
        v.note = f"key map: per {spec.per or 'completion'}, {spec.scope or 'global'}"
    model.values[concept] = v
    expected = CONCEPTS[concept].type
    if value is not None and not _fits(value, expected):
        model.mistyped.append((v, expected))


def _fits(value, expected: str) -> bool:
    if expected == "int":
        return isinstance(value, int) and not isinstance(value, bool) or (
            isinstance(value, float) and value.is_integer())
    if expected == "number":
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if expected == "bool":
        return isinstance(value, bool)
    if expected == "str":
        return isinstance(value, str)
    return True


def _components(model: RunModel, node: Node, spec: KeySpec | None) -> list[Component]:
    doc = model.doc
    names = dict(spec.fields) if spec and spec.fields else {}
    out = []
    if isinstance(node, Sequence):
        items = [(None, it) for it in node.items]
    elif isinstance(node, Mapping):
        items = [(k, v) for _n, k, v, _via in node.entries()]
    else:
        return out
    for i, (name_node, item) in enumerate(items):
        comp = Component(i, doc.loc(item))
        if name_node is not None:
            comp.fields["name"] = Value("name", name_node.text if isinstance(name_node, Scalar) else "?",
                                        doc.loc(name_node), name_node, "component")
            comp.location = doc.loc(name_node)
        if isinstance(item, Scalar):
            comp.fields["ref"] = Value("ref", item.value(model.version), doc.loc(item), item, "component")
        elif isinstance(item, Mapping):
            for field_name in REWARD_FIELDS:
                words = (names[field_name],) if field_name in names else _FIELD_WORDS[field_name]
                for w in words:
                    sub = item.get(w)
                    if sub is not None:
                        val = sub.value(model.version) if isinstance(sub, Scalar) else sub
                        comp.fields[field_name] = Value(field_name, val, doc.loc(sub), sub, "component", w)
                        break
        out.append(comp)
    return out


# --- units ------------------------------------------------------------------------------
def _convert_units(model: RunModel, opts: ResolveOptions) -> None:
    """Convert key-map values counted per prompt or per GPU into the concept's own unit."""
    for concept, spec in opts.keys.items():
        v = model.values.get(concept)
        c = CONCEPTS.get(concept)
        if v is None or c is None or not c.per or v.number is None:
            continue
        factor_num, factor_den, notes = 1, 1, []
        if spec.per and spec.per != c.per:
            g = model.values.get("rollout.group_size")
            if g is None or g.number is None:
                continue
            if c.per == "completion":
                factor_num *= g.number
                notes.append(f"x group size {g.number}")
            else:
                factor_den *= g.number
                notes.append(f"/ group size {g.number}")
        if spec.scope and spec.scope != c.scope:
            dp = _data_parallel(model)
            if dp is None:
                continue
            if c.scope == "global":
                factor_num *= dp
                notes.append(f"x {dp} data-parallel ranks")
            else:
                factor_den *= dp
                notes.append(f"/ {dp} data-parallel ranks")
        total = v.number * factor_num
        if total % factor_den:
            v.value = total / factor_den
        else:
            v.value = total // factor_den if isinstance(total, int) else total / factor_den
        v.note = f"{v.raw} as written, {' '.join(notes)}" if notes else v.note


def _data_parallel(model: RunModel):
    v = model.values.get("train.data_parallel")
    if v is not None and v.number:
        return int(v.number)
    world = _world(model)
    if world is None:
        return None
    par = 1
    for name in ("train.tensor_parallel", "train.pipeline_parallel", "train.context_parallel"):
        p = model.values.get(name)
        if p is not None and p.number:
            par *= int(p.number)
    if par <= 0 or world % par:
        return None
    return world // par


def _world(model: RunModel):
    v = model.values.get("cluster.world_size")
    if v is not None and isinstance(v.number, int):
        return v.number
    n, g = model.values.get("cluster.nodes"), model.values.get("cluster.gpus_per_node")
    if n is not None and g is not None and isinstance(n.number, int) and isinstance(g.number, int):
        return n.number * g.number
    return None


# --- derived arithmetic -----------------------------------------------------------------------
def _int(model: RunModel, concept: str, derived=True):
    v = model.values.get(concept) or (model.derived.get(concept) if derived else None)
    if v is None:
        return None
    n = v.number
    if isinstance(n, float) and n.is_integer():
        n = int(n)
    return n if isinstance(n, int) else None


def _put(model: RunModel, concept: str, value, inputs: tuple, note: str) -> None:
    loc = Location(model.path)
    for name in inputs:
        src = model.values.get(name) or model.derived.get(name)
        if src is not None:
            loc = src.location
            break
    model.derived[concept] = Value(concept, value, loc, None, "derived", "", inputs=inputs, note=note)


def derive(model: RunModel) -> None:
    """Compute what the stated values imply; only exact divisions become derived values
    (the arithmetic rules report the ones that do not divide)."""
    n, g = _int(model, "cluster.nodes"), _int(model, "cluster.gpus_per_node")
    if n is not None and g is not None:
        _put(model, "cluster.world_size", n * g, ("cluster.nodes", "cluster.gpus_per_node"), f"{n} x {g}")
    world = _int(model, "cluster.world_size")
    if world is not None and "train.data_parallel" not in model.values:
        names = [c for c in ("train.tensor_parallel", "train.pipeline_parallel", "train.context_parallel")
                 if _int(model, c)]
        par = 1
        for c in names:
            par *= _int(model, c)
        if par > 0 and world % par == 0:
            text = f"{world} / {par}" if names else f"{world} GPUs, no model parallelism"
            _put(model, "train.data_parallel", world // par, ("cluster.world_size",) + tuple(names), text)
    p, gs = _int(model, "batch.prompts"), _int(model, "rollout.group_size")
    if p is not None and gs is not None:
        _put(model, "batch.rollouts", p * gs, ("batch.prompts", "rollout.group_size"), f"{p} x {gs}")
    rollouts, mini = _int(model, "batch.rollouts"), _int(model, "batch.mini")
    epochs = _int(model, "optim.epochs")
    if rollouts is not None and mini and rollouts % mini == 0:
        e = epochs if epochs else 1
        _put(model, "optim.updates_per_step", rollouts // mini * e,
             ("batch.rollouts", "batch.mini") + (("optim.epochs",) if epochs else ()),
             f"{rollouts} / {mini}" + (f" x {epochs} epochs" if epochs else ""))
    micro, dp = _int(model, "batch.micro_per_gpu"), _int(model, "train.data_parallel")
    if mini is not None and micro and dp and mini % (micro * dp) == 0:
        _put(model, "batch.grad_accum", mini // (micro * dp),
             ("batch.mini", "batch.micro_per_gpu", "train.data_parallel"), f"{mini} / ({micro} x {dp})")
