"""OPT: learning rate, schedule, durability and reproducibility."""
from __future__ import annotations

import posixpath
from itertools import groupby, islice
from operator import itemgetter

from trimtab import Location, rule
from trimtab.common.spill import Spill

from ._common import anchor, num, shown, unresolved


@rule(id="OPT-1", name="lr-range", level="warning",
      summary="The policy learning rate is outside the range used for RL fine-tuning.",
      rationale="Full-weight RL fine-tuning of language models uses small learning rates: 1e-6 (arXiv:2402.03300) "
      "and 3e-6 (arXiv:2501.12948v2, from memory: the revised version; v1 states no training "
      "hyperparameters) are published values. A rate far above collapses the "
      "policy within a few steps; far below, it does not move. The range is the options min and max "
      "(defaults 1e-8 and 1e-4: two orders of magnitude either side of the published 1e-6, common practice; "
      "raise max for adapter training, which uses larger rates). A rate of 0 or less is an error: "
      "nothing is learned, or the update climbs the loss.",
      options={"min": 1e-8, "max": 1e-4})
def lr_range(ctx):
    m = ctx.model
    v = m.get("optim.lr")
    if v is not None and v.number is not None:
        x, lo, hi = v.number, ctx.options["min"], ctx.options["max"]
        if x <= 0:
            yield ctx.finding(f"optim.lr = {shown(v)}: the learning rate must be positive", v.location,
                              level="error", subject=x)
        elif x < lo or x > hi:
            side = "below" if x < lo else "above"
            yield ctx.finding(f"optim.lr = {shown(v)} is {side} the range {num(lo)} … {num(hi)} for RL "
                              "fine-tuning (published: 1e-6, 3e-6)", v.location, subject=x)
    c = m.get("critic.lr")
    if c is not None and c.number is not None and c.number <= 0:
        yield ctx.finding(f"critic.lr = {shown(c)}: the learning rate must be positive", c.location,
                          level="error", subject=c.number)


@rule(id="OPT-2", name="warmup-not-shorter", level="warning",
      summary="The learning-rate warm-up is not shorter than the run.",
      rationale="A warm-up raises the learning rate linearly to its peak over the warm-up steps (common practice). "
      "With warm-up steps >= the run's total steps the peak rate is never reached, and every step "
      "trains at a fraction of the rate the config states.", rl_only=False)
def warmup(ctx):
    m = ctx.model
    w, t = m.get("optim.warmup_steps"), m.get("schedule.total_steps")
    if w is None or t is None or w.number is None or t.number is None or t.number <= 0:
        return
    if w.number >= t.number:
        yield ctx.finding(f"optim.warmup_steps = {shown(w)} is not shorter than the run (schedule.total_steps = "
                          f"{shown(t)}): the peak learning rate is never reached", w.location,
                          related=[t.location.with_message("the run's length")], subject=w.number)


def _off(v) -> bool:
    return v.value is False or (v.number is not None and v.number <= 0)


@rule(id="OPT-3", name="checkpoint-durability", level="warning",
      summary="A crash would lose the whole run: no checkpoint before the end.",
      rationale="A long run that writes no checkpoint before its last step loses everything to one node failure, "
      "and failures are routine at cluster scale (common practice). Reported when the checkpoint "
      "interval is not shorter than the run (the first checkpoint would be the last step), or when "
      "checkpoints are off (0 or false) for a run longer than the option long_run_steps (default 1000 "
      "steps, common practice: hours of cluster time). An interval below 1 is a share of the run's total "
      "steps (a documented convention of the trade, common practice), so it is always shorter than the run.",
      options={"long_run_steps": 1000}, rl_only=False)
def checkpoint_durability(ctx):
    m = ctx.model
    every, total = m.get("checkpoint.every"), m.get("schedule.total_steps")
    if every is None or total is None or total.number is None or total.number <= 0:
        return
    related = [total.location.with_message("the run's length")]
    if _off(every):
        limit = ctx.options["long_run_steps"]
        if total.number > limit:
            yield ctx.finding(f"checkpoints are off (checkpoint.every = {shown(every)}) for a run of "
                              f"{shown(total)} steps (longer than {num(limit)}): a crash loses everything",
                              every.location, related=related, subject="off")
    elif every.number is not None and every.number >= total.number:
        yield ctx.finding(f"checkpoint.every = {shown(every)} is not shorter than the run (schedule.total_steps = "
                          f"{shown(total)}): no checkpoint is written before the end, so a crash loses everything",
                          every.location, related=related, subject=every.number)


_DIRS = ("checkpoint.dir", "output.dir")


def _norm(value) -> str | None:
    """A directory as a comparable string; None for values that are not plain paths (templated
    ones such as ``runs/${name}`` differ between runs even when written the same)."""
    if not isinstance(value, str):
        return None
    text = value.strip()
    if not text or any(ch in text for ch in "${}%*?"):
        return None
    text = text.replace("\\", "/")
    norm = posixpath.normpath(text)
    return norm if norm not in (".", "/") else None


def _label(entry) -> str:
    return entry.path if entry.index == 0 else f"{entry.path} (document {entry.index + 1})"


@rule(id="OPT-4", name="shared-output-dir", level="warning",
      summary="Two run configs write to the same checkpoint or output directory.",
      rationale="Two runs that share a checkpoint or output directory overwrite each other's checkpoints, and a "
      "resumed run may load the other run's weights (common practice: one directory per run). This rule "
      "sees every run config of one invocation: each run of a clash is reported, pointing at the others. "
      "Directories are compared as written, after normalising '.', '..' and trailing slashes; templated "
      "paths (containing $, { or %) are skipped, because they differ per run.",
      needs=_DIRS, scope="set")
def shared_dir(ctx):
    # Claims (directory, run, concept) are grouped through a sorted Spill: one directory's runs
    # are in memory at a time, however many runs the set has.
    with Spill(key=itemgetter(0)) as claims:
        yield from _clashes(ctx, claims)


def _clashes(ctx, claims):
    for entry in ctx.runs:
        dirs_here = set()
        for concept in _DIRS:
            v = entry.values.get(concept)
            d = _norm(v.value) if v is not None else None
            if d is None or d in dirs_here:
                continue  # checkpoints and outputs of one run in one directory: no clash
            dirs_here.add(d)
            claims.append((d, entry, concept))
    for d, claimed in groupby(claims, key=itemgetter(0)):
        group, seen = [], set()
        for _d, entry, concept in claimed:
            if (entry.path, entry.index) not in seen:  # a run checked twice is one run
                seen.add((entry.path, entry.index))
                group.append((entry, concept))
        if len(group) < 2:
            continue
        # One finding per place the directory is written. Runs composed from a shared base file meet at
        # the base's line: that line gets one finding naming every run that inherits it.
        places: dict[tuple, list[tuple[object, str]]] = {}
        for entry, concept in group:
            loc = entry.values[concept].location
            places.setdefault((loc.path or "", loc.line, loc.col), []).append((entry, concept))
        for members in places.values():
            entry, concept = members[0]
            v = entry.values[concept]
            here = {id(e) for e, _c in members}
            # Bounded: a directory shared by many runs lists the first few of them, and each place
            # looks only at its own runs and the first few others, so the rule stays linear in the
            # number of runs even when every run writes the directory at a line of its own.
            others = list(islice(((e, c) for e, c in group if id(e) not in here), MAX_LISTED))
            n_others = len(group) - len(members)
            related = [e.values[c].location.with_message(f"the same directory ({c}{_doc(e)})")
                       for e, c in others]
            related += [Location(e.path, 0, 0, message=f"in the run composed from {_label(e)}")
                        for e, _c in members[:MAX_LISTED] if e.path != v.location.path]
            if len(members) == 1:
                text = (f"{concept} = {v.value}: also written to by "
                        f"{_listing([_label(e) for e, _c in others], n_others)}")
            else:
                runs = [_label(e) for e, _c in members[:MAX_LISTED]] + [_label(e) for e, _c in others]
                text = f"{concept} = {v.value} is written to by {len(group)} runs ({_listing(runs, len(group))})"
            yield ctx.finding(text + "; the runs overwrite each other's checkpoints and outputs", v.location,
                              related=related, subject=d)


MAX_LISTED = 10


def _listing(labels: list[str], total: int | None = None) -> str:
    """The first labels, and how many more of ``total`` (default: all of them are given)."""
    total = len(labels) if total is None else total
    shown = ", ".join(labels[:MAX_LISTED])
    return shown + (f" and {total - MAX_LISTED} more" if total > MAX_LISTED else "")


def _doc(entry) -> str:
    return f" of document {entry.index + 1}" if entry.index else ""


@rule(id="OPT-5", name="seed-unstated", level="note", summary="No random seed is stated.",
      rationale="Without a seed, sampling, data order and initialisation differ between launches, and a "
      "surprising result cannot be reproduced or bisected (common practice: state run.seed).")
def seed_unstated(ctx):
    m = ctx.model
    if unresolved(m, "run.seed"):
        return
    yield ctx.finding("no random seed (run.seed) is stated: the run cannot be reproduced",
                      anchor(m, "run.name", "run.estimator", key_path="run.seed"), subject="unstated",
                      suggestion="state a seed, e.g. seed: 1")

