"""Human-readable report of a chain check: an aligned table, the reasons, counterexamples, caution."""

from __future__ import annotations

import math
import textwrap
from typing import Any

from .verdict import Verdict

__all__ = ["format_result", "table"]


def table(header: list[str], rows: list[list[str]], *, right: set[int] = frozenset()) -> list[str]:
    """Columns padded to their widest cell; columns in ``right`` are right-aligned."""
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]

    def line(cells: list[str]) -> str:
        parts = [str(c).rjust(w) if i in right else str(c).ljust(w) for i, (c, w) in enumerate(zip(cells, widths))]
        return "  ".join(parts).rstrip()

    return [line(header), line(["-" * w for w in widths]), *[line(r) for r in rows]]


def _pct(confidence: float) -> str:
    return f"{100 * confidence:.4g}%"


def _fmt(x: float | None, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return f"{x:.{digits}f}"


def _row(j: Any) -> list[str]:
    est = j.estimate
    if j.decided_by == "static" and j.verdict is Verdict.COMPOSES:
        counts, rate, low, high = "-", "-", "proved", "-"
    elif j.decided_by == "static" and j.reason.startswith("structural mismatch"):
        counts, rate, low, high = "-", "-", "mismatch", "-"
    elif est is not None and est.single_start:
        counts, rate, low, high = f"{est.k}/{est.n}", _fmt(est.rate), "single start", "-"
    elif est is not None:
        counts, rate, low, high = f"{est.k}/{est.n}", _fmt(est.rate), _fmt(est.low), _fmt(est.high)
    else:
        counts, rate, low, high = "-", "-", "-", "-"
    by = j.decided_by or "-"
    return [str(j.index), j.label, j.verdict.value, by, counts, rate, low, high, j.timeouts]


def _more(j: Any) -> str:
    est = j.estimate
    if j.verdict is not Verdict.UNSURE:
        return ""
    if est is None:
        return ""
    if est.more_episodes is None:
        if est.n == 0:
            return "nothing was measured here"
        return "no number of episodes at the observed rates decides it"
    return f"about {est.more_episodes} more episodes at the observed rates would decide it (with --method sim)"


def _wrap(text: str, indent: str, width: int) -> list[str]:
    return textwrap.wrap(text, width=width, initial_indent=indent, subsequent_indent=" " * len(indent) + "  ") or [indent]


def _legend(result: Any) -> str:
    measured = [j.estimate for j in result.all_handoffs if j.estimate is not None and not j.estimate.single_start and j.estimate.n]
    if not measured:
        return "lower/upper: one-sided exact bounds (none measured)"
    lows = " / ".join(dict.fromkeys(_pct(e.low_confidence) for e in measured))
    highs = " / ".join(dict.fromkeys(_pct(e.high_confidence) for e in measured))
    return (
        f"lower: one-sided {lows} bound on handing over at every handoff up to this one, entry included (composes when >= "
        f"require.handoff); upper: one-sided {highs} bound on this handoff alone (breaks when < require.handoff; "
        f"Bonferroni over the entry and {len(result.handoffs)} handoff{'' if len(result.handoffs) == 1 else 's'})"
    )


def _feel(j: Any) -> str:
    """A's worst values against its declared limits and the command jump at the switch."""
    sim = j.evidence_of("sim")
    if sim is None or j.handoff.is_entry:
        return ""
    parts = [f"{x['limit']} worst {x['worst']:.3g} of declared {x['declared']:g} {x['unit']}" + (" (EXCEEDED)" if x["exceeded"] else "")
             for x in sim.details.get("limits", [])]
    jump = sim.details.get("command_jump")
    if jump is not None:
        parts.append(f"command jump at the switch max {jump['max']:.3g}, p95 {jump['p95']:.3g} over {jump['switches']} switches")
    return ("at the handoff: " + "; ".join(parts)) if parts else ""


def _handoff_lines(j: Any, width: int) -> list[str]:
    out = _wrap(f"{j.index} {j.label}: {j.verdict.value}" + (f" (decided by {j.decided_by})" if j.decided_by else "") + f": {j.reason}", "", width)
    more = _more(j)
    if more:
        out += _wrap(more, "    ", width)
    feel = _feel(j)
    if feel:
        out += _wrap(feel, "    ", width)
    for n in j.notes:
        out += _wrap(n, "    note: ", width)
    if j.verdict is not Verdict.COMPOSES and j.counterexamples:
        cex = j.counterexamples
        out.append(f"    counterexamples ({len(cex)} shown):")
        for x in cex:
            tag = "" if x.confirmed else " [candidate]"
            why = "; ".join(x.violations) or "(no clause fails on this state)"
            out += _wrap(f"{x.source} {x.note}{tag}: {why}", "      ", width)
    return out


def _whole_chain_lines(result: Any, width: int) -> list[str]:
    s = result.whole_chain
    c = result.chain
    if s is None and result.model_chain is not None:
        m = result.model_chain
        verdict = {"composes": "meets", "breaks": "fails", "unsure": "unsure whether it meets"}[m.verdict.value]
        return _wrap(
            f"whole chain (option models, not simulated): {m.k}/{m.n} particles completed; lower bound {m.low:.3f}, upper "
            f"bound {m.high:.3f} (held-out model error included); {verdict} require.chain {c.chain_requirement:g}", "", width,
        )
    if s is None:
        return _wrap(
            f"whole chain: not simulated; meeting require.chain {c.chain_requirement:g} needs simulation "
            f"(--method auto or sim): unsure", "", width,
        )
    succ = s.success
    sec = {k: v * s.dt for k, v in s.duration.items()}
    verdict = {"composes": "meets", "breaks": "fails", "unsure": "unsure whether it meets"}[succ.verdict.value]
    if succ.single_start:
        bounds = "single start, no bound"
    else:
        bounds = f"lower bound {succ.low:.3f} ({_pct(succ.low_confidence)}), upper bound {succ.high:.3f} ({_pct(succ.high_confidence)})"
    stages = ", ".join(f"{k} {v}" for k, v in s.stages.items())
    out = _wrap(
        f"whole chain: {succ.k}/{succ.n} distinct trajectories completed = {_fmt(succ.rate)}; {bounds}; "
        f"{verdict} require.chain {c.chain_requirement:g}",
        "", width,
    )
    out += _wrap(f"episodes run: {s.episodes} ({stages}), {s.distinct_trajectories} distinct trajectories; plan: {s.rule}", "  ", width)
    active = {k: v for k, v in s.disturbances.items() if v}
    out += _wrap("disturbances: " + (", ".join(f"{k} {v}" for k, v in active.items()) if active else "none (noise-free but for the initial states)"), "  ", width)
    out += _wrap(
        f"duration mean {sec['mean']:.2f} s (p10 {sec['p10']:.2f}, p50 {sec['p50']:.2f}, p90 {sec['p90']:.2f}); return mean "
        f"{s.ret['mean']:.3g} (std {s.ret['std']:.3g}), discounted {s.ret['discounted_mean']:.3g} at gamma {s.ret['gamma']:g}",
        "  ", width,
    )
    rows = [
        [t.ref + (" (may time out)" if t.may_time_out else ""), str(t.offered), str(t.ran), str(t.stopped), str(t.timed_out),
         str(t.env_ended), str(t.refused), _fmt(t.duration_mean * s.dt, 2), _fmt(t.duration_p90 * s.dt, 2)]
        for t in s.skills
    ]
    out += ["  " + r for r in table(["skill", "offered", "ran", "stopped", "timed out", "env ended", "refused", "mean s", "p90 s"], rows, right=set(range(1, 9)))]
    return out


def format_result(result: Any, *, width: int = 100) -> str:
    """The text summary: header, table, reasons and counterexamples, whole chain, notes, caution."""
    from .result import EXIT_TEXT

    c = result.chain
    out: list[str] = []
    where = [result.env_id]
    if result.variant:
        where.append(f"variant {result.variant}")
    where.append(f"initial states {result.initial_states or 'robot default'}")
    out.append(f"chain {c.name} ({', '.join(where)})")
    if c.description:
        out += _wrap(c.description, "  ", width)
    out.append(
        f"require handoff {c.require_handoff:g}, chain {c.chain_requirement:g} at {_pct(c.confidence)} confidence; "
        f"method {result.method} (used: {', '.join(result.methods_used) or '-'})"
    )
    if not result.handoffs:
        out.append(f"no handoff: a chain of one skill ({result.entry.handoff.target})")
    out.append("")
    header = ["#", "handoff", "verdict", "decided by", "handed over", "rate", "lower", "upper", "timeouts"]
    out += table(header, [_row(j) for j in result.all_handoffs], right={0, 4, 5, 6, 7})
    out += _wrap(_legend(result), "", width)
    out.append("")
    for j in result.all_handoffs:
        out += _handoff_lines(j, width)
    out.append("")
    out += _whole_chain_lines(result, width)
    if result.notes:
        out.append("")
        for n in result.notes:
            out += _wrap(n, "" if n.startswith("warning: ") else "note: ", width)
    out.append("")
    code = result.exit_code
    out.append(f"exit code {code}: {EXIT_TEXT[code]}")
    out.append("")
    out += textwrap.wrap(result.caution, width=width)
    return "\n".join(out)
