"""From labelled start states to a proposed ``starts_when``: splits, classifier, candidate regions,
selection and exact intervals. Pure numpy (and the predicate parser); no MuJoCo, no store.

Three disjoint splits of the episodes (seeded): *fit* (the classifier and the peeling path),
*choose* (the classifier's penalty and model, and which candidate regions are eligible) and
*report* (calibration, and the precision and recall printed with exact intervals).

Selection. Every candidate is a box from the peeling path cut down to at most ``max_clauses``
bounds. A candidate is eligible when the lower end of the exact (Clopper-Pearson) interval of its
precision on the choose split meets the target. The eligible ones are then tested on the report
split in a fixed order, most certain first (lower bound on the choose split, descending), stopping
at the first one whose report lower bound misses the target (fixed-sequence testing: the order is
set before the report split is looked at, so every accepted candidate meets the target at the
stated confidence together). Of the accepted ones, the largest recall on the choose split wins.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from ..checker.stats import clopper_pearson
from .classifier import MODELS, brier, fit_classifier, reliability
from .columns import Column, candidate_columns, column_matrix, number_text, varying
from .region import Region, few_clauses, peel_path, round_bound

__all__ = ["Splits", "make_splits", "rate", "Proposal", "propose", "SPLIT_FRACTIONS"]

SPLIT_FRACTIONS = (0.4, 0.3, 0.3)  # fit, choose, report
_MAX_BOXES = 120  # boxes of the peeling path turned into candidates


@dataclass(frozen=True, eq=False)
class Splits:
    """Disjoint row indices: fit, choose, report."""

    fit: np.ndarray
    choose: np.ndarray
    report: np.ndarray

    def sizes(self) -> dict[str, int]:
        return {"fit": int(self.fit.size), "choose": int(self.choose.size), "report": int(self.report.size)}


def make_splits(n: int, seed: int, fractions: Sequence[float] = SPLIT_FRACTIONS) -> Splits:
    """A seeded random partition of range(n) into fit / choose / report rows."""
    order = np.random.default_rng([seed, 20]).permutation(n)
    a = int(round(fractions[0] * n))
    b = a + int(round(fractions[1] * n))
    return Splits(np.sort(order[:a]), np.sort(order[a:b]), np.sort(order[b:]))


def rate(k: int, n: int, confidence: float) -> dict[str, Any]:
    """``k`` of ``n`` with its exact two-sided interval: {successes, episodes, rate, interval}."""
    low, high = clopper_pearson(k, n, confidence)
    return {"successes": int(k), "episodes": int(n), "rate": (k / n) if n else None, "interval": [low, high]}


def _precision_recall(inside: np.ndarray, success: np.ndarray, rows: np.ndarray, confidence: float) -> tuple[dict, dict]:
    i, s = inside[rows], success[rows]
    return rate(int(np.sum(i & s)), int(np.sum(i)), confidence), rate(int(np.sum(i & s)), int(np.sum(s)), confidence)


@dataclass(frozen=True, eq=False)
class Proposal:
    """The outcome of ``propose``: the region (None when none meets the target) and the evidence."""

    region: Region | None
    text: str | None
    precision: dict | None  # report split
    recall: dict | None
    current: dict | None  # the hand-written starts_when on the report split
    classifier: dict
    calibration: dict
    splits: Splits
    candidates: list[dict]
    axes: list[tuple[str, int | None]]  # the two state components that matter most, for plots
    target: float
    confidence: float
    note: str | None = None
    why_none: str | None = None
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {
            "proposed": self.text,
            "precision": self.precision,
            "recall": self.recall,
            "current": self.current,
            "precision_target": self.target,
            "confidence": self.confidence,
            "classifier": self.classifier,
            "calibration": self.calibration,
            "splits": self.splits.sizes(),
            "candidates": self.candidates,
            "axes": [[q, i] for q, i in self.axes],
            "note": self.note,
            "no_region": self.why_none,
        }


def _support_region(states: Mapping[str, np.ndarray], rows: np.ndarray, quantities: Sequence[str],
                    max_clauses: int) -> tuple[str, str]:
    """The sampled range over ``rows``: one ``lo <= Q[i] <= hi`` clause per component that varied.

    Components that took one value are left out (a zero-width bound would demand that exact
    value); at most ``max_clauses`` clauses are kept, widest sampled spread first. Returns the
    text and a sentence saying what was left out.
    """
    found = []  # (spread, order, name, lo, hi)
    for q in quantities:
        v = np.asarray(states[q], dtype=np.float64)[rows]
        flat = v.reshape(v.shape[0], -1)
        for i in range(flat.shape[1]):
            if varying(flat[:, i]):
                lo, hi = float(flat[:, i].min()), float(flat[:, i].max())
                found.append((hi - lo, len(found), q if v.ndim == 1 else f"{q}[{i}]", lo, hi))
    kept = sorted(sorted(found, key=lambda f: -f[0])[:max_clauses], key=lambda f: f[1])
    clauses = [f"{number_text(round_bound(lo, s, outward='down'))} <= {name} <= {number_text(round_bound(hi, s, outward='up'))}"
               for s, _, name, lo, hi in kept]
    dropped = len(found) - len(kept)
    left = f"; {dropped} more varying component(s) left unconstrained by --max-clauses {max_clauses}" if dropped else ""
    return " and ".join(clauses), left


def _candidates(columns, x, p_fit, *, max_clauses: int, alpha: float | None) -> list[Region]:
    min_support = max(20, int(0.02 * x.shape[0]))
    path = peel_path(x, p_fit, [c.two_sided for c in columns], alpha=alpha, min_support=min_support)
    if len(path) > _MAX_BOXES:  # evenly spaced along the path, both ends kept
        path = [path[i] for i in np.unique(np.linspace(0, len(path) - 1, _MAX_BOXES).round().astype(int))]
    seen, out = set(), []
    for box in path:
        region = few_clauses(columns, box, x, p_fit, max_clauses=max_clauses)
        if region.key() not in seen:
            seen.add(region.key())
            out.append(region)
    return out


def _select(regions, columns, matrix, success, splits, *, target, confidence):
    """(chosen region or None, table of candidates, why none)."""
    rows = []
    for r in regions:
        inside = r.holds(columns, matrix)
        prec, rec = _precision_recall(inside, success, splits.choose, confidence)
        rows.append({"region": r, "inside": inside, "choose_precision": prec, "choose_recall": rec})
    eligible = [row for row in rows if prec_low(row["choose_precision"]) >= target]
    eligible.sort(key=lambda row: (-prec_low(row["choose_precision"]), row["choose_recall"]["successes"], row["region"].size))
    accepted = []
    for row in eligible:
        prec, rec = _precision_recall(row["inside"], success, splits.report, confidence)
        row["report_precision"], row["report_recall"] = prec, rec
        if prec_low(prec) < target:
            break
        accepted.append(row)
    table = [_candidate_row(row) for row in rows]
    if not accepted:
        if not eligible:
            best = max((prec_low(r["choose_precision"]) for r in rows), default=0.0)
            return None, table, (f"no candidate region reaches precision {target} on the choose split (best lower bound "
                                 f"{best:.3f}){_needs(target, confidence, splits.choose.size)}")
        first = eligible[0]["report_precision"]
        return None, table, (f"the most certain candidate misses precision {target} on the report split "
                             f"(lower bound {prec_low(first):.3f})")
    best = max(accepted, key=lambda row: (row["choose_recall"]["successes"], -row["region"].size))
    return best["region"], table, None


def _needs(target: float, confidence: float, split: int) -> str:
    from ..checker.stats import episodes_for_zero_failures

    least = episodes_for_zero_failures(target, 1.0 - (1.0 - confidence) / 2.0)
    return f"; a region needs at least {least} successes in each of the choose and report splits ({split} episodes each): run more episodes"


def prec_low(r: dict) -> float:
    return float(r["interval"][0]) if r["episodes"] else 0.0


def _candidate_row(row: dict) -> dict:
    out = {"starts_when": row["region"].text or "(every sampled state)", "clauses": row["region"].size,
           "choose_precision": row["choose_precision"], "choose_recall": row["choose_recall"]}
    if "report_precision" in row:
        out["report_precision"] = row["report_precision"]
    return out


def _components(states: Mapping[str, np.ndarray], rows: np.ndarray, quantities: Sequence[str]) -> list[tuple[str, int | None]]:
    out: list[tuple[str, int | None]] = []
    for q in quantities:
        v = np.asarray(states[q], dtype=np.float64)[rows]
        if v.ndim == 1:
            out += [(q, None)] if varying(v) else []
        else:
            out += [(q, i) for i in range(v.shape[1]) if varying(v[:, i])]
    return out


def _shuffled(states: Mapping[str, np.ndarray], comp: tuple[str, int | None], rng: np.random.Generator) -> dict[str, np.ndarray]:
    q, i = comp
    out = dict(states)
    v = np.array(states[q], dtype=np.float64, copy=True)
    if i is None:
        v = v[rng.permutation(v.shape[0])]
    else:
        v[:, i] = v[rng.permutation(v.shape[0]), i]
    out[q] = v
    return out


def _axes(classifier, states, rows, success, region: Region | None, quantities, seed: int) -> list[tuple[str, int | None]]:
    """The two state components that matter most: those the proposal reads, ranked by how much the
    classifier's Brier score on the fit rows grows when that component is shuffled (permutation
    importance), then the classifier's other most important components."""
    comps = _components(states, rows, quantities)
    sub = {q: np.asarray(states[q])[rows] for q in quantities}
    y = success[rows]
    base = brier(classifier.predict(sub), y)
    rng = np.random.default_rng([seed, 21])
    score = {c: brier(classifier.predict(_shuffled(sub, c, rng)), y) - base for c in comps}
    read = set()
    for b in (region.bounds if region is not None else ()):
        col = b.column
        read |= {c for c in comps if c[0] == col.quantity and (col.is_norm or c[1] == col.index)}
    ranked = sorted(comps, key=lambda c: (c not in read, -score[c]))
    return ranked[:2]


def _calibration(p: np.ndarray, success: np.ndarray, splits: Splits) -> dict[str, Any]:
    y = success[splits.report].astype(float)
    base = float(np.mean(success[splits.fit])) if splits.fit.size else 0.5
    return {"split": "report", "brier": brier(p[splits.report], y), "brier_base_rate": brier(np.full(y.size, base), y),
            "reliability": reliability(p[splits.report], y)}


def _measured(text: str, states, parameters, success, splits, confidence) -> tuple[Any, dict, dict]:
    """Parse ``text`` as a predicate and measure it on the report split (what the runtime would evaluate)."""
    from ..predicates import parse_predicate

    shapes = {**{k: np.shape(v) for k, v in parameters.items()}, **{k: np.shape(v)[1:] for k, v in states.items()}}
    pred = parse_predicate(text, shapes, what="proposed starts_when")
    inside = np.asarray(pred.evaluate({**parameters, **states}), dtype=bool)
    prec, rec = _precision_recall(inside, success, splits.report, confidence)
    return pred, prec, rec


def propose(
    states: Mapping[str, np.ndarray],
    success: np.ndarray,
    *,
    seed: int = 0,
    precision: float = 0.95,
    confidence: float = 0.95,
    max_clauses: int = 4,
    at_rest: Sequence[str] = (),
    models: Sequence[str] = MODELS,
    current: Any = None,
    parameters: Mapping[str, np.ndarray] | None = None,
    support_quantities: Sequence[str] | None = None,
    alpha: float | None = None,
) -> Proposal:
    """Propose a ``starts_when`` from start ``states`` (name -> (n, *shape)) and ``success`` (n,) bool.

    ``current``: the hand-written starts_when (a parsed Predicate), measured alongside;
    ``parameters``: values predicates may name; ``support_quantities``: the quantities whose
    sampled box is proposed when the skill succeeds on the whole sample (default: all).
    """
    if not 0.0 < precision < 1.0:
        raise ValueError(f"precision target must be in (0, 1), got {precision}")
    if max_clauses < 1:
        raise ValueError(f"max_clauses must be >= 1, got {max_clauses}")
    success = np.asarray(success, dtype=bool)
    parameters = dict(parameters or {})
    quantities = [q for q, v in states.items() if np.ndim(v) <= 2]
    splits = make_splits(success.size, seed)
    classifier, tried = fit_classifier(states, success, splits.fit, splits.choose, quantities=quantities, models=models, seed=seed)
    p = classifier.predict(states)
    columns = candidate_columns({q: np.asarray(states[q])[splits.fit] for q in quantities}, success[splits.fit], at_rest=at_rest)
    matrix = column_matrix(columns, states) if columns else np.zeros((success.size, 0))
    regions = _candidates(columns, matrix[splits.fit], p[splits.fit], max_clauses=max_clauses, alpha=alpha)
    chosen, table, why = _select(regions, columns, matrix, success, splits, target=precision, confidence=confidence)
    text = note = prec = rec = None
    if chosen is not None:
        text = chosen.text
        if chosen.size == 0:
            rows = np.arange(success.size)
            text, left = _support_region(states, rows, support_quantities or quantities, max_clauses)
            note = ("the skill met the target on the whole sample: the proposal is the sampled range of every episode "
                    f"(all three splits; components that did not vary are left out){left}; "
                    "widen the initial states to find where it stops working")
        if not text:
            chosen, text, note = None, None, None
            why = "every sampled start state was the same: widen the initial states (--widen) to learn a region"
        else:
            _, prec, rec = _measured(text, states, parameters, success, splits, confidence)
    cur = None
    if current is not None:
        inside = np.asarray(current.evaluate({**parameters, **states}), dtype=bool)
        cp, cr = _precision_recall(inside, success, splits.report, confidence)
        cur = {"starts_when": str(current), "precision": cp, "recall": cr}
    return Proposal(
        region=chosen, text=text, precision=prec, recall=rec, current=cur,
        classifier={**classifier.describe(), "compared": tried}, calibration=_calibration(p, success, splits),
        splits=splits, candidates=table, axes=_axes(classifier, states, splits.fit, success, chosen, quantities, seed),
        target=precision, confidence=confidence, note=note, why_none=why,
    )
