"""Terminal views: how ``explain`` shows a test and its margin."""

from notifier.cli.views import _tree
from notifier.engine.rules import Comparison, Group, Outcome


def _shown(cond, outcomes) -> list[str]:
    out: list[str] = []
    _tree(cond, {id(o.test): o for o in outcomes}, "", out)
    return out


def test_a_margin_is_shown_where_it_moves_the_threshold_even_under_not():
    # README, rule-file reference: a margin keeps a firing rule holding; under `not` the
    # inner test narrows. `wind_ms above 5, margin 1`: plain it clears below 4 m/s;
    # under `not` (calm enough) it clears above 6 m/s.
    plain = Comparison("wind_ms", "above", 5.0, 1.0, 3)
    inner = Comparison("wind_ms", "above", 5.0, 1.0, 4)
    lines = _shown(
        Group("all", (plain, Group("not", (inner,), 4)), 2),
        [Outcome(plain, 5.5, True, True), Outcome(inner, 4.5, False, True)],
    )
    assert "> 5 m/s (clears past > 4 m/s): held" in lines[0]
    assert lines[1].strip() == "not:"
    assert "> 5 m/s (clears past > 6 m/s): not met" in lines[2]
