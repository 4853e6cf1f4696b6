"""The shipped safety notes (rules/safety.yaml) against the rules that send them and the
people who read them: no road advice to a harbour or a venue, a dense-fog note that says
the rule's own threshold, port and farm notes on the point of their trade."""

from __future__ import annotations

import re

import pytest

from notifier.core.config import default_rules_dir
from notifier.engine.rule_files import load_rule_set
from notifier.engine.rules import Comparison, Group

RULES = load_rule_set([default_rules_dir()])

# words of driving advice (common practice of road-safety wording)
ROAD_ADVICE = re.compile(r"dipped|headlight|fog light|slow down|drive|driving|braking", re.I)


def _text(hazard: str, use: str, refs: tuple[str, ...] = ()) -> str:
    return " ".join(n.text for n in RULES.notes_for(hazard, use, refs))


@pytest.mark.parametrize("use", ["port", "venue"])
@pytest.mark.parametrize("hazard", ["fog", "icing"])
def test_no_driving_advice_reaches_a_harbour_or_a_venue(use, hazard):
    refs = tuple(r for rule in RULES.rules if rule.hazard == hazard for r in rule.safety)
    assert not ROAD_ADVICE.search(_text(hazard, use, refs))


def _comparisons(cond) -> list[Comparison]:
    if isinstance(cond, Comparison):
        return [cond]
    assert isinstance(cond, Group)
    return [c for child in cond.children for c in _comparisons(child)]


def test_the_dense_fog_note_names_the_dense_fog_rules_threshold():
    (rule,) = [r for r in RULES.rules if r.id == "dense-fog"]
    assert "fog-dense" in rule.safety
    (vis,) = [c for c in _comparisons(rule.when) if c.feature == "visibility_m"]
    note = RULES.safety["fog-dense"].text
    assert f"below {vis.value:g} m" in note
    assert "few tens of metres" not in note  # the old text contradicted the threshold


def test_the_port_notes_speak_port_practice():
    fog = _text("fog", "port")
    for word in ("harbour authority", "pilotage", "berthing", "sound signals"):
        assert word in fog
    # sea water of salinity 35 freezes at -1.92 °C (docs/references.md [Sea-ice check])
    assert "-1.9 °C" in _text("icing", "port")


def test_the_farm_notes_give_the_reasons_that_matter():
    assert "inversion" in _text("fog", "farm")  # drift stays airborne (common practice)
    icing = _text("icing", "farm")
    # protection before the crop's critical temperature, not on seeing ice (common practice)
    assert "critical temperature" in icing and "no white frost" in icing
