"""The loop that runs the rules (engine.run_rules) and the origin chains a finding carries
(Context._with_chain): what they give is what one call a rule, one Context a rule and an index of
every value gave."""
from __future__ import annotations

import itertools

from trimtab.common.findings import Level, Location
from trimtab.engine.registry import Context, Rule, _place_key, run_rule, run_rules
from trimtab.resolve.model import Component, RunModel, Value


def _rule(rule_id: str, check, needs=()) -> Rule:
    return Rule(rule_id, "some-rule", Level.WARNING, "Summary.", "Rationale.", check, tuple(needs))


def _model(**kw) -> RunModel:
    model = RunModel(None, **kw)  # type: ignore[arg-type]  # no document: path unused here
    return model


def test_each_rule_sees_its_own_rule_options_and_level():
    seen = []

    def check(ctx):
        seen.append((ctx.rule.id, ctx.options, ctx.level))
        yield ctx.finding(f"from {ctx.rule.id}", Location("a.yaml", 1, 1))

    a, b = _rule("TST-1", check), _rule("TST-2", check)
    model = _model(values={"x.y": Value("x.y", 1, Location("a.yaml", 1, 1))})
    ctx = Context(a, model, None, {}, Level.WARNING)
    found: list = []
    crashed = run_rules([(a, {"k": 1}, Level.WARNING, frozenset()), (b, {"k": 2}, Level.ERROR, frozenset())],
                        ctx, "a.yaml", found)
    assert not crashed
    assert seen == [("TST-1", {"k": 1}, Level.WARNING), ("TST-2", {"k": 2}, Level.ERROR)]
    assert [(f.rule_id, f.level) for f in found] == [("TST-1", Level.WARNING), ("TST-2", Level.ERROR)]
    assert all(f.fingerprint for f in found)


def test_needs_are_tested_against_the_live_concepts():
    ran = []

    def check(ctx):
        ran.append(ctx.rule.id)
        return None

    rules = [_rule("TST-1", check, ["x.y"]), _rule("TST-2", check, ["x.z"]), _rule("TST-3", check)]
    loc = Location("a.yaml", 1, 1)
    model = _model(values={"x.y": Value("x.y", 1, loc), "x.z": Value("x.z", 2, loc)},
                   dead={"x.z": Value("x.w", False, loc)})
    assert model.live() == {"x.y"}
    plan = [(r, {}, r.level, frozenset(r.needs)) for r in rules]
    run_rules(plan, Context(rules[0], model, None, {}, Level.WARNING), "a.yaml", [], model.live())
    assert ran == ["TST-1", "TST-3"]
    assert [r.id for r in rules if all(model.get(c) is not None for c in r.needs)] == ran


def test_a_crash_keeps_only_the_crash_and_the_next_rule_runs():
    def crashes(ctx):
        yield ctx.finding("before the crash", Location("a.yaml", 1, 1))
        raise ValueError("boom")

    def fine(ctx):
        yield ctx.finding("fine", Location("a.yaml", 2, 1))

    a, b = _rule("TST-1", crashes), _rule("TST-2", fine)
    found: list = []
    crashed = run_rules([(a, {}, a.level, frozenset()), (b, {}, b.level, frozenset())],
                        Context(a, None, None, {}, a.level), "a.yaml", found)
    assert crashed
    assert [f.rule_id for f in found] == ["TOOL-1", "TST-2"]
    one, c = run_rule(a, Context(a, None, None, {}, a.level), "a.yaml")
    assert c and [f.rule_id for f in one] == ["TOOL-1"]


def test_a_rule_that_asked_for_an_unknown_concept_reports_nothing():
    def asks(ctx):
        ctx.model.get("x.unknown")
        yield ctx.finding("guess", Location("a.yaml", 1, 1))

    def other(ctx):
        yield ctx.finding("sure", Location("a.yaml", 1, 1))

    loc = Location("a.yaml", 1, 1)
    model = _model(unknown={"x.unknown": Value("x.unknown", None, loc)})
    a, b = _rule("TST-1", asks), _rule("TST-2", other)
    found: list = []
    run_rules([(a, {}, a.level, frozenset()), (b, {}, b.level, frozenset())],
              Context(a, model, None, {}, a.level), "a.yaml", found)
    assert [f.rule_id for f in found] == ["TST-2"]


def _reference_chain(model: RunModel, location: Location, related: list) -> list:
    """The origin chain as it was worked out with an index of every value of the run."""
    out = list(related)
    if not (model.chains or any(v.chain for v in model.values.values())):
        return out
    values = list(model.values.values())
    for comp in model.components:
        values.extend(comp.fields.values())
    index: dict = {}
    for v in values:
        index.setdefault(_place_key(v.location), []).append(v)
    seen = {_place_key(location)} | {_place_key(r) for r in out}
    for loc in [location] + list(out):
        found = index.get(_place_key(loc), ())
        if loc.key_path and any(v.location.key_path == loc.key_path for v in found):
            found = [v for v in found if v.location.key_path == loc.key_path]
        for v in found:
            for hop in v.chain:
                k = _place_key(hop)
                if k not in seen:
                    seen.add(k)
                    out.append(hop)
    return out


def test_origin_chains_as_an_index_of_every_value_gives_them():
    """Values sharing places under the same or other key paths, chained or not, in the concepts and in
    a reward component; every primary and related location among those places."""
    places = [("a.yaml", 3, 5), ("a.yaml", 7, 1), (None, 0, 0)]
    key_paths = ["", "x.y", "x.z"]
    hops = [Location("base.yaml", 2, 3, message="replaced"), Location("base.yaml", 9, 1, message="merged"),
            Location("ref.yaml", 4, 4)]
    layouts = list(itertools.product(range(len(places)), range(len(key_paths)), (0, 1, 2)))
    rule = _rule("TST-1", lambda ctx: None)
    checked = 0
    for n, picks in enumerate(itertools.combinations(layouts, 3)):
        if n % 7:
            continue  # a spread of the combinations, in bounded time
        values = {}
        for i, (p, k, c) in enumerate(picks):
            path, line, col = places[p]
            chain = hops[:c] if c < 2 else hops[1:]
            values[f"x.v{i}"] = Value(f"x.v{i}", i, Location(path, line, col, key_path=key_paths[k]), chain=chain)
        comp_loc = Location("a.yaml", 7, 1, key_path="x.y")
        comp = Component(0, comp_loc, {"ref": Value("ref", "m:f", comp_loc, chain=[hops[2]])})
        for chains in ({}, {"x.y": [hops[0]]}):
            model = _model(values=dict(values), components=[comp], chains=chains)
            for p, k in itertools.product(range(len(places)), range(len(key_paths))):
                primary = Location(*places[p], key_path=key_paths[k])
                for related in ([], [Location("a.yaml", 7, 1, message="see", key_path="x.z")]):
                    ctx = Context(rule, model, None, {}, Level.WARNING)
                    assert ctx._with_chain(primary, related) == _reference_chain(model, primary, related)
                    checked += 1
    assert checked > 1000
