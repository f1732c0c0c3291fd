"""Human-readable report of a chain check: an aligned table, the reasons, counterexamples, caution."""

from __future__ import annotations

import math
import textwrap
from typing import Any

from ..safety import CAUTION
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
    return f"{100 * confidence:g}%"


def _fmt(x: float | None, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return f"{x:.{digits}f}"


def _row(j: Any) -> list[str]:
    est = j.estimate
    if j.decided_by == "static" and j.verdict is Verdict.COMPOSES:
        counts, rate, interval = "-", "-", "proved"
    elif j.decided_by == "structural":
        counts, rate, interval = "-", "-", "mismatch"
    elif j.decided_by == "static" and j.verdict is Verdict.BREAKS:
        counts, rate, interval = "-", "-", "counterexample"
    elif est is not None:
        counts = f"{est.k}/{est.n}"
        rate = _fmt(est.rate)
        interval = f"[{est.low:.3f}, {est.high:.3f}]"
    else:
        counts, rate, interval = "-", "-", "-"
    by = j.decided_by or "/".join(m for m in j.methods if m != "structural") or "-"
    return [str(j.index), j.label, j.verdict.value, by, counts, rate, interval, j.timeouts]


def _more(j: Any) -> str:
    est = j.estimate
    if j.verdict is not Verdict.UNSURE:
        return ""
    if est is None:
        return "no method measured it"
    if est.more_episodes is None:
        if est.n == 0:
            return "nothing was measured (no stops)"
        return "the observed rate equals the requirement: no number of episodes decides it"
    return f"about {est.more_episodes} more episodes at the observed rate would decide it"


def _wrap(text: str, indent: str, width: int) -> list[str]:
    return textwrap.wrap(text, width=width, initial_indent=indent, subsequent_indent=indent + "  ") or [indent]


def format_result(result: Any, *, width: int = 100) -> str:
    """The text summary: header, table, reasons and counterexamples, chain stats, notes, caution."""
    c = result.chain
    out: list[str] = []
    where = [result.env_id]
    if result.variant:
        where.append(f"variant {result.variant}")
    where.append(f"start {result.start or 'rig default'}")
    out.append(f"chain {c.name} ({', '.join(where)})")
    if c.description:
        out += _wrap(c.description, "  ", width)
    sim = f"{result.episodes} simulated episodes, seed {result.seed}" if result.episodes else "no simulation"
    out.append(
        f"require {c.require:g} at {_pct(c.confidence)} confidence; method {result.method} "
        f"(used: {', '.join(result.methods_used) or '-'}); {sim}"
    )
    if not result.handoffs:
        out.append(
            f"no handoff: a chain of one skill; checked only that the start distribution lies in "
            f"{result.entry.junction.target}'s starts_when"
        )
    out.append("")
    header = ["#", "junction", "verdict", "by", "accepted", "rate", f"{_pct(c.confidence)} interval", "timeouts"]
    out += table(header, [_row(j) for j in result.junctions], right={0, 4, 5})
    out.append("")
    for j in result.junctions:
        out += _wrap(f"{j.index} {j.label}: {j.verdict.value}" + (f" ({j.decided_by})" if j.decided_by else "") + f": {j.reason}", "", width)
        more = _more(j)
        if more:
            out += _wrap(more, "    ", width)
        for n in j.notes:
            out += _wrap(n, "    note: ", width)
        if j.verdict is Verdict.BREAKS or (j.verdict is Verdict.UNSURE and j.counterexamples):
            cex = j.counterexamples
            if cex:
                out.append(f"    counterexamples ({len(cex)} shown):")
                for x in cex:
                    tag = "" if x.confirmed else " [candidate]"
                    why = "; ".join(x.violations) or "(no clause fails on this state)"
                    out += _wrap(f"{x.source} {x.note}{tag}: {why}", "      ", width)
        static = j.evidence_of("static")
        if static is not None and static.details.get("timeouts") and not j.junction.is_entry:
            out += _wrap(f"timeouts: {static.details['timeouts']}", "    ", width)
    s = result.chain_stats
    if s is not None:
        out.append("")
        succ = s.success
        sec = {k: v * s.dt for k, v in s.steps.items()}
        out += _wrap(
            f"whole chain (simulation, {s.episodes} episodes): success {succ.k}/{succ.n} = {_fmt(succ.rate)} "
            f"[{succ.low:.3f}, {succ.high:.3f}]; duration mean {sec['mean']:.2f} s (p10 {sec['p10']:.2f}, "
            f"p50 {sec['p50']:.2f}, p90 {sec['p90']:.2f}); return mean {s.ret['mean']:.3g} (std {s.ret['std']:.3g}), "
            f"discounted {s.ret['discounted_mean']:.3g} at gamma {s.ret['gamma']:g}",
            "",
            width,
        )
        rows = [
            [t.ref, str(t.offered), str(t.ran), str(t.stopped), str(t.timed_out), str(t.env_terminated), str(t.refused),
             _fmt(t.steps_mean * s.dt, 2), _fmt(t.steps_p90 * s.dt, 2)]
            for t in s.skills
        ]
        out += ["  " + r for r in table(["skill", "offered", "ran", "stopped", "timed out", "env ended", "refused", "mean s", "p90 s"], rows, right=set(range(1, 9)))]
    if result.notes:
        out.append("")
        for n in result.notes:
            out += _wrap(n, "note: ", width)
    out.append("")
    code = result.exit_code
    out.append(f"exit code {code}: " + {0: "every junction composes", 1: "some handoff breaks", 3: "some junction is unsure"}[code])
    out.append("")
    out += textwrap.wrap(CAUTION, width=width)
    return "\n".join(out)
