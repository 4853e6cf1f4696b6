"""Rule files: every validator rejects what it should, with file:line; evaluation logic."""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import numpy as np
import pytest

from notifier.core.config import default_rules_dir
from notifier.core.errors import ConfigError
from notifier.engine.rule_files import load_rule_set
from notifier.engine.rules import evaluate_rule
from tests.engine.scenes import site

SAFETY = """\
version: 1
safety_notes:
  fog-general: {hazards: [fog], text: "Take care."}
"""


def write_rules(tmp_path: Path, body: str, name: str = "test.yaml") -> Path:
    folder = tmp_path / "rules"
    folder.mkdir(exist_ok=True)
    (folder / "safety.yaml").write_text(SAFETY)
    path = folder / name
    path.write_text(textwrap.dedent(body))
    return folder


GOOD = """\
version: 1
rules:
  - id: near-saturation
    hazard: fog
    level: watch
    kind: radiation
    when:
      - dewpoint_depression_c: {at_most: 1.0, margin: 0.5}
      - wind_ms: {below: 3}
    explain: "depression {dewpoint_depression_c:.1f}"
    safety: [fog-general]
"""


def load_error(tmp_path: Path, body: str) -> str:
    with pytest.raises(ConfigError) as info:
        load_rule_set([write_rules(tmp_path, body)])
    return str(info.value)


def test_shipped_rules_load():
    rules = load_rule_set([default_rules_dir()])
    ids = {r.id for r in rules.rules}
    assert {
        "radiation-fog-watch",
        "radiation-fog-warning",
        "observed-fog",
        "dense-fog",
        "sea-fog-watch",
        "steam-fog-watch",
        "freezing-fog-watch",
        "hoar-frost",
        "data-gap",
    } <= ids
    assert {r.hazard for r in rules.rules} == {"fog", "icing", "data_gap"}


def test_good_file_loads(tmp_path):
    rules = load_rule_set([write_rules(tmp_path, GOOD)])
    (rule,) = rules.rules
    assert rule.id == "near-saturation"
    assert rule.line == 3


@pytest.mark.parametrize(
    ("change", "pattern"),
    [
        (
            ("dewpoint_depression_c:", "dewpoint_depresion_c:"),
            r"test\.yaml:8: rule 'near-saturation': unknown feature 'dewpoint_depresion_c' "
            r"— did you mean 'dewpoint_depression_c'\?",
        ),
        (
            ("at_most: 1.0,", "atmost: 1.0,"),
            r"test\.yaml:8: rule 'near-saturation': dewpoint_depression_c: unknown test "
            r"'atmost'",
        ),
        (
            ("hazard: fog", "hazard: smog"),
            r"test\.yaml:4: rule 'near-saturation': hazard must be one of fog, icing, "
            r"data_gap \(got 'smog'\)",
        ),
        (
            ("level: watch", "level: alarm"),
            r"test\.yaml:5: rule 'near-saturation': level must be watch or warning",
        ),
        (
            ("{below: 3}", "{below: three}"),
            r"test\.yaml:9: rule 'near-saturation': wind_ms: below expects a number",
        ),
        (
            ("{below: 3}", "{between: [3, 1]}"),
            r"test\.yaml:9: .*between expects \[low, high\] with low ≤ high",
        ),
        (("{below: 3}", "{is: true}"), r"test\.yaml:9: .*wind_ms: 'is' applies to yes/no features"),
        (
            ("{below: 3}", "{below: 3, above: 1}"),
            r"test\.yaml:9: .*wind_ms: expected exactly one test \(got 2\)",
        ),
        (("margin: 0.5", "margin: -1"), r"test\.yaml:8: .*margin must be a number ≥ 0"),
        (
            ("safety: [fog-general]", "safety: [fog-nonsense]"),
            r"test\.yaml:3: rule 'near-saturation': unknown safety note 'fog-nonsense'",
        ),
        (
            ("kind: radiation", "kind: radiation\n    hold: soon"),
            r"test\.yaml:7: rule 'near-saturation': hold: expected a duration",
        ),
        (
            ("kind: radiation", "kind: radiation\n    colour: red"),
            r"test\.yaml:7: rule 'near-saturation': unknown key 'colour'",
        ),
        (
            ("{dewpoint_depression_c:.1f}", "{dew_depression:.1f}"),
            r"explain: unknown feature \{dew_depression\}",
        ),
        (("version: 1", "version: 7"), r"test\.yaml:1: version must be 1 \(got 7\)"),
        (
            (
                "    when:\n      - dewpoint_depression_c: {at_most: 1.0, margin: 0.5}\n"
                "      - wind_ms: {below: 3}\n",
                "    when: []\n",
            ),
            r"empty condition list",
        ),
        (
            ("- wind_ms: {below: 3}", "- wind_ms: 3"),
            r"test\.yaml:9: .*wind_ms: expected a test such as \{below: 1\.5\}",
        ),
        (
            ("- wind_ms: {below: 3}", "- {wind_ms: {below: 3}, cloud_pct: {below: 3}}"),
            r"test\.yaml:9: .*a condition is a mapping with one key",
        ),
        (
            ("- wind_ms: {below: 3}", "- not: {observed_fog: {is: maybe}}"),
            r"observed_fog: 'is' expects true or false",
        ),
    ],
    ids=[
        "feature-typo",
        "unknown-test",
        "hazard",
        "level",
        "not-a-number",
        "between-order",
        "is-on-number",
        "two-tests",
        "negative-margin",
        "safety-ref",
        "hold",
        "unknown-key",
        "template-feature",
        "version",
        "empty-when",
        "bare-value",
        "two-keys",
        "is-bool",
    ],
)
def test_each_validator_rejects(tmp_path, change, pattern):
    old, new = change
    assert old in GOOD
    message = load_error(tmp_path, GOOD.replace(old, new, 1))
    assert re.search(pattern, message), message


def test_yaml_syntax_error_names_the_line(tmp_path):
    message = load_error(tmp_path, GOOD.replace("kind: radiation", "kind: [radiation"))
    assert "test.yaml:" in message and "YAML syntax" in message


def test_duplicate_ids_across_files(tmp_path):
    folder = write_rules(tmp_path, GOOD)
    (folder / "more.yaml").write_text(GOOD)
    with pytest.raises(ConfigError, match=r"duplicate id \(first at"):
        load_rule_set([folder])


def test_all_problems_reported_at_once_and_nothing_half_loads(tmp_path):
    bad = GOOD.replace("hazard: fog", "hazard: smog").replace("level: watch", "level: x")
    folder = write_rules(tmp_path, bad)
    (folder / "fine.yaml").write_text(GOOD.replace("near-saturation", "other"))
    with pytest.raises(ConfigError) as info:
        load_rule_set([folder])
    assert len(info.value.problems) == 2  # both problems of the bad file, none invented


def _rule(tmp_path, body):
    return load_rule_set([write_rules(tmp_path, body)]).rules[0]


def test_three_valued_logic_unknown_never_holds(tmp_path):
    rule = _rule(tmp_path, GOOD)
    sites = [site(f"s{i}") for i in range(4)]
    feats = {
        "dewpoint_depression_c": np.array([0.5, 0.5, np.nan, 2.0]),
        "wind_ms": np.array([1.0, np.nan, 1.0, 1.0]),
    }
    res = evaluate_rule(rule, sites, [feats])
    assert [r.fires for r in res] == [True, False, False, False]
    assert res[1].missing == ["wind_ms"]
    assert res[2].missing == ["dewpoint_depression_c"]


def test_not_and_any_follow_kleene_logic(tmp_path):
    body = GOOD.replace(
        "      - dewpoint_depression_c: {at_most: 1.0, margin: 0.5}\n      - wind_ms: {below: 3}\n",
        "      - any:\n"
        "          - observed_fog: {is: true}\n"
        "          - not: {wind_ms: {above: 5}}\n",
    ).replace('"depression {dewpoint_depression_c:.1f}"', '"x"')
    rule = _rule(tmp_path, body)
    sites = [site(f"s{i}") for i in range(4)]
    feats = {
        "observed_fog": np.array([1.0, np.nan, np.nan, 0.0]),
        "wind_ms": np.array([9.0, 2.0, np.nan, 9.0]),
    }
    assert [r.fires for r in evaluate_rule(rule, sites, [feats])] == [True, True, False, False]


def test_margin_sustains_an_active_rule_but_does_not_fire_it(tmp_path):
    rule = _rule(tmp_path, GOOD)
    sites = [site("a"), site("b"), site("c")]
    feats = {
        "dewpoint_depression_c": np.array([0.9, 1.3, 1.6]),
        "wind_ms": np.array([1.0, 1.0, 1.0]),
    }
    res = evaluate_rule(rule, sites, [feats])
    assert [r.fires for r in res] == [True, False, False]
    assert [r.sustains for r in res] == [True, True, False]


def test_hold_requires_every_sample_in_the_window(tmp_path):
    rule = _rule(tmp_path, GOOD.replace("kind: radiation", "kind: radiation\n    hold: 20min"))
    assert rule.hold_s == 1200
    sites = [site("a"), site("b")]
    now = {"dewpoint_depression_c": np.array([0.5, 0.5]), "wind_ms": np.array([1.0, 1.0])}
    before = {"dewpoint_depression_c": np.array([0.8, 1.5]), "wind_ms": np.array([1.0, 1.0])}
    res = evaluate_rule(rule, sites, [now, before, before])
    assert [r.fires for r in res] == [True, False]
    assert res[1].held_now and not res[1].hold_met


def test_site_filters(tmp_path):
    body = GOOD.replace(
        "kind: radiation", "kind: radiation\n    sites: {exposure: [coast], use: [port]}"
    )
    rule = _rule(tmp_path, body)
    sites = [site("harbour", exposure="coast", use="port"), site("field")]
    feats = {"dewpoint_depression_c": np.array([0.5, 0.5]), "wind_ms": np.array([1.0, 1.0])}
    assert [r.fires for r in evaluate_rule(rule, sites, [feats])] == [True, False]


def test_reasons_name_value_and_threshold(tmp_path):
    rule = _rule(tmp_path, GOOD)
    feats = {"dewpoint_depression_c": np.array([0.8]), "wind_ms": np.array([1.2])}
    (res,) = evaluate_rule(rule, [site("a")], [feats])
    assert res.reasons() == ["dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s < 3 m/s"]
    assert res.explanation({"dewpoint_depression_c": 0.8}) == "depression 0.8"


def test_reasons_leave_out_whether_a_sensor_reports(tmp_path):
    # a test of precip_known picks the branch that may hold ("no rain gauge: judged as
    # before"); shown as "precipitation reported: no" it would read as "it is dry"
    body = GOOD.replace(
        "      - wind_ms: {below: 3}\n",
        "      - wind_ms: {below: 3}\n      - precip_known: {is: false}\n",
    )
    rule = _rule(tmp_path, body)
    feats = {
        "dewpoint_depression_c": np.array([0.8]),
        "wind_ms": np.array([1.2]),
        "precip_known": np.array([0.0]),
    }
    evaluation = evaluate_rule(rule, [site("a")], [feats])
    (res,) = evaluation
    assert res.fires
    assert res.reasons() == ["dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s < 3 m/s"]
    assert evaluation.reasons_at(0) == res.reasons()  # the snapshots' path, the same


def test_reasons_leave_out_the_clock_of_the_night(tmp_path):
    # "time to sunrise 15.3 h ≤ 16 h" only says "tonight" (the message's When: line says
    # it in words): a harbour desk reads the air, the wind and the sky as the reasons
    body = GOOD.replace(
        "      - wind_ms: {below: 3}\n",
        "      - wind_ms: {below: 3}\n      - hours_to_sunrise: {at_most: 16}\n"
        "      - is_night: {is: true}\n",
    )
    rule = _rule(tmp_path, body)
    feats = {
        "dewpoint_depression_c": np.array([0.8]),
        "wind_ms": np.array([1.2]),
        "hours_to_sunrise": np.array([15.3]),
        "is_night": np.array([1.0]),
    }
    evaluation = evaluate_rule(rule, [site("a")], [feats])
    (res,) = evaluation
    assert res.fires
    assert res.reasons() == ["dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s < 3 m/s"]
    assert evaluation.reasons_at(0) == res.reasons()


# -- margin: hysteresis in the direction that keeps the rule true ------------------------
#
# Definition: with its margin a rule *holds* (sustains an active alert) at a value v
# exactly when, without the margin, it would fire at some value within ``margin`` of v:
# the margin is a tolerance that favours the alert already in force. Plainly: it widens a
# test that sits under an even number of `not`s and narrows one under an odd number, so
# that the group as a whole is always easier to hold. The expected results below come from
# that definition, over the plain (margin-free) truth of each condition.

THRESHOLD = 5.0
MARGIN_TESTS = {
    # name: (YAML test, plain truth of the test at v)
    "above": ("{above: 5%s}", lambda v: v > THRESHOLD),
    "at_most": ("{at_most: 5%s}", lambda v: v <= THRESHOLD),
    "between": ("{between: [4.5, 5.5]%s}", lambda v: 4.5 <= v <= 5.5),
}
NOTS = {0: "wind_ms: %s", 1: "not: {wind_ms: %s}", 2: "not: {not: {wind_ms: %s}}"}
VALUES = (3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0, 6.5, 7.0)
MARGINS = (0.0, 1.0)


def _plain(test: str, nots: int, v: float) -> bool:
    held = MARGIN_TESTS[test][1](v)
    return held if nots % 2 == 0 else not held


def _holds_with_margin(test: str, nots: int, v: float, margin: float) -> bool:
    """Fires without the margin at some value within ``margin`` of v (the grid holds both
    ends of the window and every threshold in it, enough for these tests)."""
    steps = 40
    near = [v - margin + 2 * margin * i / steps for i in range(steps + 1)]
    return any(_plain(test, nots, u) for u in near)


MARGIN_CASES = [
    pytest.param(
        test,
        nots,
        margin,
        v,
        id=f"{'not-' * nots}{test}-margin{margin:g}-at{v:g}",
    )
    for test in MARGIN_TESTS
    for nots in NOTS
    for margin in MARGINS
    for v in VALUES
]


def _margin_rule(tmp_path, test: str, nots: int, margin: float):
    spec = MARGIN_TESTS[test][0] % (f", margin: {margin:g}" if margin else "")
    body = GOOD.replace(
        "      - dewpoint_depression_c: {at_most: 1.0, margin: 0.5}\n      - wind_ms: {below: 3}\n",
        f"      - {NOTS[nots] % spec}\n",
    ).replace('"depression {dewpoint_depression_c:.1f}"', '"x"')
    return _rule(tmp_path, body)


@pytest.mark.parametrize(("test", "nots", "margin", "v"), MARGIN_CASES)
def test_margin_keeps_the_rule_true_under_any_number_of_nots(tmp_path, test, nots, margin, v):
    rule = _margin_rule(tmp_path, test, nots, margin)
    (res,) = evaluate_rule(rule, [site("a")], [{"wind_ms": np.array([v])}])
    assert res.fires == _plain(test, nots, v)  # the margin never changes what fires
    assert res.sustains == _holds_with_margin(test, nots, v, margin)
    assert res.sustains or not res.fires  # what fires always holds


@pytest.mark.parametrize("nots", list(NOTS), ids=[f"nots{n}" for n in NOTS])
def test_margin_never_makes_unknown_hold(tmp_path, nots):
    rule = _margin_rule(tmp_path, "above", nots, 1.0)
    (res,) = evaluate_rule(rule, [site("a")], [{"wind_ms": np.array([np.nan])}])
    assert not res.fires and not res.sustains


def test_margin_under_not_is_hysteresis_on_the_other_side(tmp_path):
    """The README's example: ``not: {wind_ms: {above: 5, margin: 1}}`` fires at 4.5 and,
    once active, holds until the wind is above 6 m/s (it no longer fires at 5.5)."""
    rule = _margin_rule(tmp_path, "above", 1, 1.0)
    winds = [4.5, 5.5, 6.0, 6.5]
    res = evaluate_rule(rule, [site(f"s{i}") for i in range(4)], [{"wind_ms": np.array(winds)}])
    assert [r.fires for r in res] == [True, False, False, False]
    assert [r.sustains for r in res] == [True, True, True, False]
