"""Fit a skill's option models from rollouts by Monte Carlo regression on held-out-checked splits.

Method (``monte_carlo_ridge``): each episode that ran gives one sample of
(start state -> steps k, gamma^k, gamma^k 1{stopped}, gamma^k 1{timed out}, discounted return,
reward, end reason, end state). Targets are regressed on the start-state
features (``FeatureMap``: standardised, then ``poly2`` for up to 12 inputs or
random Fourier features beyond) by ridge with a leave-one-out penalty; end
reasons by multinomial logistic regression; end states of stopped (and,
separately, of timed-out) episodes by ridge for the mean plus a pool of 5-fold out-of-fold residuals, from which
``EndStateModel`` samples and takes split-conformal intervals.

Episodes are split once (``holdout`` fraction, seeded) into a training and a
held-out part; the shipped models are the ones fitted on the training part,
so the reported held-out errors belong to exactly these models.
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Any, Mapping, Sequence

import numpy as np

from kinetome.library.errors import InvalidInputError
from kinetome.library.runtime.records import EndReason
from kinetome.library.option_models import (
    DURATION_OUTPUTS,
    EXPANSIONS,
    OUTCOME_CODES,
    REWARD_OUTPUTS,
    DurationModel,
    EndStateModel,
    HeldOutEpisodes,
    ModelsMeta,
    OptionModels,
    RewardModel,
    classification_errors,
    component_names,
    default_quantities,
    envelope_arrays,
    fit_support,
    flatten_states,
    interval_coverage,
    regression_errors,
)

from .fitting_kernels import fit_feature_map, fit_linear_head, fit_softmax, ridge_loo

__all__ = ["fit_option_models", "collect_and_fit", "MIN_EPISODES", "MIN_STOPPED", "RESIDUAL_POOL", "CV_FOLDS"]

MIN_EPISODES = 10  # episodes that ran, fewer cannot give a training and a held-out part
MIN_STOPPED = 10  # training episodes of one outcome needed for its end-state model
RESIDUAL_POOL = 4096  # out-of-fold residual rows kept for sampling and intervals
CV_FOLDS = 5
_RAN = (int(EndReason.STOPPED), int(EndReason.TIMED_OUT), int(EndReason.TERMINATED))


def _bad(message: str) -> InvalidInputError:
    return InvalidInputError(message)


def _take(values: Mapping[str, np.ndarray], index: np.ndarray) -> dict[str, np.ndarray]:
    return {k: np.asarray(v)[index] for k, v in values.items()}


def _split(n: int, holdout: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Seeded (train, test) row indices; test gets round(holdout * n) rows, at least 1."""
    perm = np.random.default_rng([seed, 0x0F17]).permutation(n)
    n_test = min(n - 1, max(1, int(round(holdout * n))))
    return np.sort(perm[n_test:]), np.sort(perm[:n_test])


def _variant_of(meta: Mapping[str, Any]) -> tuple[str, str]:
    v = meta.get("variant", "")
    if isinstance(v, Mapping):
        return str(v.get("name", "")), str(v.get("digest", meta.get("variant_digest", "")))
    return ("" if v is None else str(v)), str(meta.get("variant_digest", ""))


def _check_quantities(names: Sequence[str], values: Mapping[str, np.ndarray], label: str) -> tuple[str, ...]:
    names = tuple(names)
    if not names:
        raise _bad(f"{label} must name at least one quantity, got none; e.g. ('qpos', 'qvel')")
    unknown = [q for q in names if q not in values]
    if unknown:
        raise _bad(f"{label} must be recorded quantities, got unknown {unknown}; known: {sorted(values)}")
    return names


def _duration_targets(seg: Any, gamma: float, rows: np.ndarray) -> np.ndarray:
    steps = np.asarray(seg.steps, dtype=np.float64)[rows]
    discount = np.asarray(seg.discount, dtype=np.float64)[rows]
    expect = gamma**steps
    if not np.allclose(discount, expect, rtol=1e-9, atol=1e-12):
        worst = int(np.argmax(np.abs(discount - expect)))
        raise _bad(
            f"segment discount must equal gamma**steps with gamma={gamma}, got {discount[worst]} for "
            f"{int(steps[worst])} steps (expected {expect[worst]}); pass the gamma the rollout used"
        )
    reason = np.asarray(seg.reason)[rows]
    stopped = reason == OUTCOME_CODES["stopped"]
    timed_out = reason == OUTCOME_CODES["timed_out"]
    return np.stack([steps, discount, discount * stopped, discount * timed_out], axis=1)


def _regression_report(names: Sequence[str], y_true: np.ndarray, y_pred: np.ndarray) -> dict[str, dict]:
    return {name: regression_errors(y_true[:, i], y_pred[:, i]) for i, name in enumerate(names)}


def _fit_duration(fmap, x_tr, x_te, seg, gamma, train, test) -> DurationModel:
    y_tr, y_te = _duration_targets(seg, gamma, train), _duration_targets(seg, gamma, test)
    lo = np.array([y_tr[:, 0].min(), 0.0, 0.0, 0.0])
    hi = np.array([y_tr[:, 0].max(), 1.0, 1.0, 1.0])
    head = fit_linear_head(x_tr, y_tr, DURATION_OUTPUTS, low=lo, high=hi)
    reasons = np.asarray(seg.reason).astype(np.int64)
    lab_tr, lab_te = reasons[train], reasons[test]
    outcome = fit_softmax(x_tr, lab_tr)
    freq = np.array([np.mean(lab_tr == c) for c in outcome.classes])
    p_te = outcome(x_te)
    errors: dict[str, Any] = _regression_report(DURATION_OUTPUTS, y_te, head(x_te))
    errors["outcome"] = classification_errors(lab_te, p_te, outcome.classes, baseline=freq)
    # Timeout as a binary event: log loss and Brier score (Brier 1950) of P(timed out).
    p_to = outcome.probability(x_te, OUTCOME_CODES["timed_out"])
    is_to = (lab_te == OUTCOME_CODES["timed_out"]).astype(np.float64)
    pc = np.clip(p_to, 1e-15, 1 - 1e-15)
    errors["timeout"] = {
        "n": int(is_to.size),
        "rate_train": float(np.mean(lab_tr == OUTCOME_CODES["timed_out"])),
        "rate_held_out": float(np.mean(is_to)),
        "log_loss": float(np.mean(-(is_to * np.log(pc) + (1 - is_to) * np.log(1 - pc)))),
        "brier": float(np.mean((p_to - is_to) ** 2)),
    }
    errors["n_train"], errors["n_held_out"] = int(train.size), int(test.size)
    return DurationModel(fmap, head, outcome, gamma, errors)


def _fit_reward(fmap, x_tr, x_te, seg, gamma, train, test, env_id, variant) -> RewardModel:
    y = np.stack([np.asarray(seg.discounted_return, dtype=np.float64), np.asarray(seg.reward, dtype=np.float64)], axis=1)
    if not np.all(np.isfinite(y[np.concatenate([train, test])])):
        raise _bad("segment rewards must be finite, got NaN/Inf; check the env's reward function")
    head = fit_linear_head(x_tr, y[train], REWARD_OUTPUTS)
    errors: dict[str, Any] = _regression_report(REWARD_OUTPUTS, y[test], head(x_te))
    errors["n_train"], errors["n_held_out"] = int(train.size), int(test.size)
    return RewardModel(fmap, head, gamma, env_id, variant, errors)


def _oof_residuals(x: np.ndarray, y: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """(n, D) out-of-fold residuals of ridge with CV_FOLDS folds."""
    n = x.shape[0]
    folds = np.array_split(rng.permutation(n), min(CV_FOLDS, n))
    res = np.empty_like(y)
    for held in folds:
        mask = np.ones(n, dtype=bool)
        mask[held] = False
        w, b, _, _ = ridge_loo(x[mask], y[mask])
        res[held] = y[held] - (x[held] @ w + b)
    return res


def _fit_end_state(fmap, starts, ends, quantities, train_s, test_s, envelope, rng, outcome) -> EndStateModel:
    shapes = tuple(tuple(np.asarray(ends[q]).shape[1:]) for q in quantities)
    names = component_names(quantities, shapes)
    y = flatten_states(ends, quantities, shapes, where="end states")
    if not np.all(np.isfinite(y)):
        raise _bad(f"end states must be finite, got NaN/Inf in the {outcome} episodes")
    x = fmap(starts)
    low, high = envelope_arrays(envelope, quantities, shapes)
    x_tr, y_tr = x[train_s], y[train_s]
    res = _oof_residuals(x_tr, y_tr, rng)
    if res.shape[0] > RESIDUAL_POOL:
        res = res[np.sort(rng.choice(res.shape[0], RESIDUAL_POOL, replace=False))]
    head = fit_linear_head(x_tr, y_tr, names, low=low, high=high)
    model = EndStateModel(fmap, quantities, shapes, head, res, low, high, outcome=outcome)
    starts_te = _take(starts, test_s)
    pred = model._mean_flat(starts_te)
    lo, hi = model.interval_flat(starts_te, 0.9)
    cover = interval_coverage(lo, hi, y[test_s])
    per = _regression_report(names, y[test_s], pred)
    r2s = [e["r2"] for e in per.values() if e["r2"] is not None]
    # Constant components (a fixed target, say) are covered trivially: leave them out of
    # the summary numbers, keep them in per_component.
    varying = np.array([e["r2"] is not None for e in per.values()])
    cov_v = cover[varying] if varying.any() else cover
    errors = {
        "components": per,
        "r2_mean": float(np.mean(r2s)) if r2s else None,
        "rmse_mean": float(np.mean([e["rmse"] for e in per.values()])),
        "coverage_90": {
            "mean": float(np.mean(cov_v)),
            "min": float(np.min(cov_v)),
            "max": float(np.max(cov_v)),
            "components_in_mean": int(cov_v.size),
            "joint": float(np.mean(np.all((y[test_s] >= lo) & (y[test_s] <= hi), axis=1))),
            "per_component": {n: float(c) for n, c in zip(names, cover)},
        },
        "n_train": int(train_s.size),
        "n_held_out": int(test_s.size),
        "residual_pool": int(res.shape[0]),
    }
    return EndStateModel(fmap, quantities, shapes, head, res, low, high, errors, outcome)


def fit_option_models(
    rollout: Any,
    segment_index: int = 0,
    *,
    gamma: float | None = None,
    features: Sequence[str] | None = None,
    end_quantities: Sequence[str] | None = None,
    seed: int = 0,
    holdout: float = 0.25,
    envelope: Any = None,
    expansion: str = "auto",
    skill_ref: str | None = None,
    variant: str | None = None,
    variant_digest: str | None = None,
    fitted_at: str | None = None,
) -> OptionModels:
    """Option models of the skill at ``rollout.segments[segment_index]``.

    ``features``: start-state quantities the models read (default ``qpos`` and
    ``qvel`` when recorded, the full simulator state; else every scalar/vector
    quantity). ``end_quantities``: what the end-state model predicts (default
    every scalar/vector quantity except Jacobians). ``envelope``: a state
    layout or name -> (low, high) mapping; end-state samples and intervals are
    clipped to it. ``gamma`` must be the rollout's (its returns were summed
    with it). Episodes the skill refused or never reached are left out; end
    states of stopped and of timed-out turns get separate models (each needs
    MIN_STOPPED training episodes), those of terminated turns none.
    """
    seg, r_gamma = _segment(rollout, segment_index, gamma, holdout=holdout, expansion=expansion)
    reasons, counts, ran = _episodes_that_ran(seg, segment_index)
    starts_all, ends_all = seg.start_state, seg.end_state
    features, end_quantities = _quantities(starts_all, ends_all, features, end_quantities)

    rng = np.random.default_rng([seed, 0xF17])
    tr_local, te_local = _split(ran.size, holdout, seed)
    train, test = ran[tr_local], ran[te_local]
    _check_finite_starts(starts_all, features, ran)
    starts_tr = _take(starts_all, train)
    fmap = fit_feature_map(starts_tr, features, expansion=expansion, rng=rng)
    x_tr, x_te = fmap(starts_tr), fmap(_take(starts_all, test))
    env_id = str(rollout.env_id)
    v_name, v_digest = _variant_of(getattr(rollout, "meta", {}) or {})
    v_name, v_digest = (v_name if variant is None else variant), (v_digest if variant_digest is None else variant_digest)

    duration = _fit_duration(fmap, x_tr, x_te, seg, r_gamma, train, test)
    reward = _fit_reward(fmap, x_tr, x_te, seg, r_gamma, train, test, env_id, v_name)
    end_models, notes = _fit_end_states(
        fmap, _take(starts_all, ran), _take(ends_all, ran), reasons[ran], end_quantities, tr_local, te_local, envelope, rng
    )
    meta = ModelsMeta(
        skill_ref=str(seg.skill_ref if skill_ref is None else skill_ref), env_id=env_id, gamma=r_gamma,
        episodes=int(np.sum(reasons != int(EndReason.NOT_REACHED))),  # offered the skill
        outcomes=counts, fitted_at=fitted_at or datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        features=features, end_quantities=end_quantities, variant=v_name, variant_digest=v_digest,
        seed=int(seed), holdout=float(holdout), notes=tuple(notes),
    )
    support = fit_support(starts_tr, _take(starts_all, test), features)
    held_out = HeldOutEpisodes.take(starts_all, ends_all, reasons, test, features, end_quantities)
    return OptionModels(duration, reward, end_models["stopped"], meta, end_models["timed_out"], support, held_out)


def _check_finite_starts(starts: Mapping[str, np.ndarray], features: Sequence[str], ran: np.ndarray) -> None:
    bad = [q for q in features if not np.all(np.isfinite(np.asarray(starts[q], dtype=np.float64)[ran]))]
    if bad:
        raise _bad(f"start states must be finite, got NaN/Inf in {bad}; check the rig's sensors or leave them out of features")


def _segment(rollout: Any, segment_index: int, gamma: float | None, *, holdout: float, expansion: str) -> tuple[Any, float]:
    """The segment to fit and the rollout's gamma; a different ``gamma`` or a bad option is refused."""
    segments = tuple(rollout.segments)
    if not -len(segments) <= int(segment_index) < len(segments):
        raise _bad(f"segment_index must be in [0, {len(segments) - 1}] for this {len(segments)}-skill rollout, got {segment_index}")
    r_gamma = float(rollout.gamma)
    if gamma is not None and abs(float(gamma) - r_gamma) > 1e-15:
        raise _bad(
            f"gamma must equal the rollout's gamma {r_gamma} because its discounted returns were summed with it, "
            f"got {gamma}; run the rollout again with gamma={gamma}"
        )
    if not 0.0 < holdout < 1.0:
        raise _bad(f"holdout must be a fraction in (0, 1), got {holdout}; e.g. 0.25")
    if expansion not in ("auto", *EXPANSIONS):
        raise _bad(f"expansion must be one of {('auto', *EXPANSIONS)}, got {expansion!r}")
    return segments[segment_index], r_gamma


def _episodes_that_ran(seg: Any, segment_index: int) -> tuple[np.ndarray, dict[str, int], np.ndarray]:
    """(end reasons, outcome counts, indices of episodes the skill ran in); too few is refused."""
    reasons = np.asarray(seg.reason).astype(np.int64)
    counts = {label: int(np.sum(reasons == code)) for label, code in OUTCOME_CODES.items()}
    counts["refused"] = int(np.sum(reasons == int(EndReason.REFUSED)))
    ran = np.flatnonzero(np.isin(reasons, _RAN))
    if ran.size < MIN_EPISODES:
        raise _bad(
            f"segment {segment_index} ({seg.skill_ref}) must have at least {MIN_EPISODES} episodes that ran, got "
            f"{ran.size} (outcomes {counts}); run more episodes or start inside starts_when"
        )
    return reasons, counts, ran


def _quantities(starts: Mapping[str, np.ndarray], ends: Mapping[str, np.ndarray], features: Sequence[str] | None,
                end_quantities: Sequence[str] | None) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The start-state features and end-state quantities to use (defaults documented in ``fit_option_models``)."""
    if features is None:
        features = ("qpos", "qvel") if "qpos" in starts and "qvel" in starts else default_quantities(starts)
    features = _check_quantities(features, starts, "features")
    if end_quantities is None:
        end_quantities = default_quantities(ends)
    end_quantities = _check_quantities(end_quantities, ends, "end_quantities")
    too_big = [q for q in end_quantities if np.ndim(ends[q]) > 2]
    if too_big:
        raise _bad(f"end_quantities must be scalars or vectors, got matrix-valued {too_big}; leave Jacobians out")
    return features, end_quantities


def _fit_end_states(fmap, starts_ran, ends_ran, reasons_ran, end_quantities, tr_local, te_local, envelope, rng):
    """End-state models of stopped and of timed-out turns (None where too few), and notes on the missing ones."""
    notes: list[str] = []
    end_models: dict[str, EndStateModel | None] = {}
    for outcome in ("stopped", "timed_out"):
        rows = np.flatnonzero(reasons_ran == OUTCOME_CODES[outcome])  # positions within the episodes that ran
        o_train, o_test = np.intersect1d(rows, tr_local), np.intersect1d(rows, te_local)
        end_models[outcome] = None
        if o_train.size >= MIN_STOPPED and o_test.size >= 1:
            end_models[outcome] = _fit_end_state(
                fmap, starts_ran, ends_ran, end_quantities, o_train, o_test, envelope, rng, outcome
            )
        elif rows.size:
            notes.append(
                f"no {outcome} end-state model: {o_train.size} {outcome} training and {o_test.size} held-out "
                f"episodes (need {MIN_STOPPED} and 1)"
            )
    return end_models, notes


def collect_and_fit(
    skill: Any,
    rig: Any,
    *,
    episodes: int,
    seed: int,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    start: Any = None,
    gamma: float = 0.99,
    progress: Any = None,
    **fit_options: Any,
) -> OptionModels:
    """Run ``skill`` for ``episodes`` episodes on ``rig`` and fit its option models.

    Starts come from ``start`` (a StartDistribution) or the rig's default; the
    end-state envelope is the rig's layout. ``fit_options`` go to
    ``fit_option_models`` (features, end_quantities, holdout, expansion...).
    ``progress(done, total)`` is called as the rollouts advance (env steps). The rollouts run in
    this process (``threads`` MuJoCo threads), on ``workers`` Ray worker processes or on the Ray
    cluster at ``address``, with the same result.
    """
    from kinetome.library.execution.spread import run_chain_spread  # lazy: mujoco
    from kinetome.library.runtime.starts import sample_starts

    qpos, qvel = sample_starts(rig, start, int(episodes), seed=seed)
    rollout = run_chain_spread([skill], rig, starts=(qpos, qvel), seed=seed, workers=workers, address=address, threads=threads,
                               gamma=gamma, progress=progress)
    fit_options.setdefault("envelope", rig.layout)
    variant = getattr(rig, "variant", None)
    if variant is not None:
        fit_options.setdefault("variant", str(getattr(variant, "name", variant)))
        digest = getattr(variant, "digest", None)
        if digest is not None:
            fit_options.setdefault("variant_digest", str(digest() if callable(digest) else digest))
    return fit_option_models(rollout, 0, gamma=gamma, seed=seed, **fit_options)
