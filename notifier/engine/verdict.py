"""Which tests decide a rule's verdict at one site (Kleene's three-valued logic).

A rule that does not fire is either *false* — a known test rules it out — or *undecided*
— no known test rules it out but a test on an unknown feature keeps it from holding. Only
the second is the data's fault. ``explain`` and replay's misses name the deciding tests:
an unknown feature inside an ``any`` that another, known, branch already satisfies, or
beside a known failing test of an ``all``, decides nothing and is not blamed.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from notifier.engine.rules import Outcome, Rule

HELD, FALSE, UNKNOWN = "held", "false", "unknown"


def undecided_by(rule: Rule, outcomes: Sequence[Outcome]) -> list[str]:
    """The unknown features that leave ``rule`` undecided; none when a known test decides."""
    verdict, idx = decide(rule.when, [(o.held, o.known) for o in outcomes])
    return sorted({outcomes[i].test.feature for i in idx}) if verdict == UNKNOWN else []


def failing(rule: Rule, outcomes: Sequence[Outcome]) -> list[Outcome]:
    """The known tests that rule ``rule`` out; none when it holds or is undecided."""
    verdict, idx = decide(rule.when, [(o.held, o.known) for o in outcomes])
    return [outcomes[i] for i in idx] if verdict == FALSE else []


def decide(when: Any, leaves: Sequence[tuple[bool, bool]]) -> tuple[str, list[int]]:
    """(verdict, indices of the deciding tests) of the condition tree ``when``.

    ``leaves`` are the (held, known) of its tests in the order the tree lists them
    (``rules.iter_comparisons``). The deciding tests: for *false*, the failing tests that
    make it false; for *unknown*, the unknown ones that leave it open; for *held*, those
    that make it hold.
    """
    verdict, deciding = _walk(when, iter(enumerate(leaves)))
    return verdict, deciding


def _walk(cond: Any, leaves: Iterator[tuple[int, tuple[bool, bool]]]) -> tuple[str, list[int]]:
    children = getattr(cond, "children", None)
    if children is None:  # a comparison
        i, (held, known) = next(leaves)
        return (HELD if held else FALSE if known else UNKNOWN), [i]
    parts = [_walk(child, leaves) for child in children]
    by = {
        v: [i for verdict, idx in parts if verdict == v for i in idx]
        for v in (HELD, FALSE, UNKNOWN)
    }
    if cond.op == "not":
        verdict, idx = parts[0]
        return {HELD: FALSE, FALSE: HELD, UNKNOWN: UNKNOWN}[verdict], idx
    first, second = (FALSE, HELD) if cond.op == "all" else (HELD, FALSE)
    if any(v == first for v, _ in parts):
        return first, by[first]
    if any(v == UNKNOWN for v, _ in parts):
        return UNKNOWN, by[UNKNOWN]
    return second, by[second]
