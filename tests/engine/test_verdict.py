"""Which tests decide a rule's verdict (notifier/engine/verdict.py).

Reference: Kleene's strong three-valued logic (docs/references.md [Kleene 1952];
S. C. Kleene, *Introduction to Metamathematics*, 1952, §64, from memory): a conjunction
is false when any part is false, else unknown when any part is unknown; a disjunction is
true when any part is true, else unknown when any part is unknown; negation swaps true
and false and keeps unknown. The verdicts are checked against that truth table written
out here, and against the engine's own array evaluation (``evaluate_condition``) on
random trees.
"""

from __future__ import annotations

import itertools
import random
from dataclasses import dataclass

import numpy as np
import pytest

from notifier.engine.rules import Comparison, Group, evaluate_condition, evaluate_rule
from notifier.engine.verdict import FALSE, HELD, UNKNOWN, decide, failing
from tests.engine.scenes import site
from tests.engine.test_rules import GOOD, _rule

T, F, U = HELD, FALSE, UNKNOWN
# Kleene 1952: AND and OR of two values, NOT of one
KLEENE_AND = {
    (a, b): F if F in (a, b) else U if U in (a, b) else T for a in (T, F, U) for b in (T, F, U)
}
KLEENE_OR = {
    (a, b): T if T in (a, b) else U if U in (a, b) else F for a in (T, F, U) for b in (T, F, U)
}
KLEENE_NOT = {T: F, F: T, U: U}
LEAF = {T: (True, True), F: (False, True), U: (False, False)}


@dataclass(frozen=True)
class _Leaf:  # a comparison stand-in: decide() only walks the tree's shape
    name: str


def test_two_part_truth_tables_follow_kleene():
    a, b = _Leaf("a"), _Leaf("b")
    for (x, y), want in KLEENE_AND.items():
        assert decide(Group("all", (a, b), None), [LEAF[x], LEAF[y]])[0] == want
    for (x, y), want in KLEENE_OR.items():
        assert decide(Group("any", (a, b), None), [LEAF[x], LEAF[y]])[0] == want
    for x, want in KLEENE_NOT.items():
        assert decide(Group("not", (a,), None), [LEAF[x]])[0] == want


def test_the_deciding_tests_are_the_ones_that_decide():
    a, b, c = _Leaf("a"), _Leaf("b"), _Leaf("c")
    # all(a false, b unknown): false, decided by a alone — b is not blamed
    assert decide(Group("all", (a, b), None), [LEAF[F], LEAF[U]]) == (F, [0])
    # all(any(a held, b unknown), c false): c decides
    tree = Group("all", (Group("any", (a, b), None), c), None)
    assert decide(tree, [LEAF[T], LEAF[U], LEAF[F]]) == (F, [2])
    # all(any(a false, b unknown), c held): undecided, by b
    assert decide(tree, [LEAF[F], LEAF[U], LEAF[T]]) == (U, [1])


def _random_tree(rng: random.Random, depth: int, names: list[str]) -> Group | Comparison:
    if depth == 0 or rng.random() < 0.3:
        name = rng.choice(names)
        return Comparison(name, "below", 0.5, 0.0, None)
    op = rng.choice(["all", "any", "not"])
    n = 1 if op == "not" else rng.randint(2, 3)
    return Group(op, tuple(_random_tree(rng, depth - 1, names) for _ in range(n)), None)


def _leaves(cond):
    if isinstance(cond, Comparison):
        return [cond]
    return [leaf for child in cond.children for leaf in _leaves(child)]


@pytest.mark.parametrize("seed", range(40))
def test_verdict_agrees_with_the_array_evaluation(seed):
    rng = random.Random(seed)
    names = ["wind_ms", "cloud_pct", "dewpoint_depression_c"]
    tree = Group("all", (_random_tree(rng, 3, names), _random_tree(rng, 3, names)), None)
    # every combination of held / failed / unknown for the three features
    combos = list(itertools.product([0.0, 1.0, np.nan], repeat=3))
    feats = {n: np.array([c[i] for c in combos]) for i, n in enumerate(names)}
    held, known = evaluate_condition(tree, feats, relaxed=False)
    for k, combo in enumerate(combos):
        values = dict(zip(names, combo, strict=True))
        leaves = [
            (bool(values[leaf.feature] < 0.5), not np.isnan(values[leaf.feature]))
            for leaf in _leaves(tree)
        ]
        verdict, idx = decide(tree, leaves)
        want = T if held[k] else F if known[k] else U
        assert verdict == want, (tree, combo)
        # an undecided verdict is pinned on unknown tests only, a decided one on known ones
        assert idx
        assert all(leaves[i][1] == (verdict != U) for i in idx), (tree, combo)


def test_an_unknown_feature_beside_a_failing_test_is_not_blamed(tmp_path):
    # GOOD: dew-point depression at most 1 °C and wind below 3 m/s
    rule = _rule(tmp_path, GOOD)
    feats = {
        "dewpoint_depression_c": np.array([4.0, np.nan]),
        "wind_ms": np.array([np.nan, 1.0]),
    }
    res = evaluate_rule(rule, [site("a"), site("b")], [feats])
    # a: the depression rules it out, the unknown wind decides nothing
    assert res[0].missing == []
    assert [o.test.feature for o in failing(rule, res[0].outcomes)] == ["dewpoint_depression_c"]
    # b: nothing known rules it out; the unknown depression leaves it open
    assert res[1].missing == ["dewpoint_depression_c"]
    assert failing(rule, res[1].outcomes) == []
