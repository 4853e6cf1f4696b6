"""Replay and verification: published scores, an invented month, live-vs-replay."""

from __future__ import annotations

import dataclasses
import json
import math
import re
from datetime import UTC, date, datetime, time, timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.cli.main import main
from notifier.demo.weather import NightSpec, simulate_night
from notifier.history.replay import replay
from notifier.history.verify import Contingency, NightOutcome, fog_observed, scores
from notifier.service.cycle import Service
from notifier.service.loading import load
from tests.history.scenes import FIRST, TWO_FIELDS

# -- scores against a published worked example ------------------------------------------


def test_scores_match_finley_worked_example():
    # Finley's 1884 tornado forecasts as worked in Wilks, Statistical Methods in the
    # Atmospheric Sciences (ch. 8): a=28, b=72, c=23, d=2680 (docs/references.md [Finley 1884]).
    t = scores(28, 72, 23, 2680)
    assert t.pod == pytest.approx(28 / 51) and round(t.pod, 3) == 0.549
    assert round(t.far, 3) == 0.720
    assert round(t.csi, 3) == 0.228
    assert round(t.bias, 2) == 1.96
    assert t.n == 2803


def test_undefined_scores_are_nan_not_zero():
    t = Contingency(0, 0, 0, 10)
    assert math.isnan(t.pod) and math.isnan(t.far) and math.isnan(t.csi)


@pytest.mark.parametrize(
    ("vis", "wx", "fog"),
    [
        (999.0, "", True),
        (1000.0, "", False),
        (np.nan, "FZFG", True),
        (3000.0, "BR", False),
        (np.nan, "-DZ BCFG", False),  # fog patches are not fog at the site (FM 15)
        (np.nan, None, False),
    ],
)
def test_fog_is_the_wmo_definition(vis, wx, fog):
    # WMO-No. 8: fog is visibility below 1000 m; METAR FG/FZFG (WMO-No. 306 FM 15); the
    # full table of what is and is not fog at the site is in test_nights.py
    assert fog_observed(vis, wx) is fog


def test_a_warning_after_onset_is_a_late_miss():
    onset = datetime(2026, 11, 3, 3, 0, tzinfo=UTC)
    night = datetime(2026, 11, 2, 12, 0, tzinfo=UTC)
    late = NightOutcome("s", night, fog_onset=onset, first_warning=onset + timedelta(minutes=10))
    same = NightOutcome("s", night, fog_onset=onset, first_warning=onset)
    early = NightOutcome("s", night, fog_onset=onset, first_warning=onset - timedelta(hours=2))
    assert late.category("warning") == "miss" and late.lead_min("warning") == -10
    assert same.category("warning") == "miss"  # raised by the fog itself: no warning
    assert early.category("warning") == "hit" and early.lead_min("warning") == 120


# -- an invented month with known fog nights -------------------------------------------


def night_kind(site_index: int, day: int) -> str:
    """Each night's invented weather, in a fixed pattern known to the test."""
    return ("fog", "quiet", "fog", "dew-only", "quiet", "sudden-fog")[(day + 2 * site_index) % 6]


def invented_night(site_id: str, evening: date, kind: str) -> pd.DataFrame:
    base = dict(
        site=site_id,
        evening=evening,
        timezone="Europe/London",
        lat=52.3,
        lon=-1.8,
        start_local=time(12, 0),
        end_local=time(11, 50),
    )
    if kind in ("fog", "dew-only"):
        frame = simulate_night(NightSpec(**base))
        if kind == "dew-only":
            # saturation, but the moisture goes into dew on the grass, not fog: no fog is
            # reported — the rules' warning is a false alarm by definition
            frame["visibility_m"] = np.maximum(frame["visibility_m"], 8000.0)
            frame["weather"] = ""
        return frame
    frame = simulate_night(
        NightSpec(**base, cloud_pct=95.0, wind_ms=6.0, cooling_k_per_sqrt_h=0.3, dewpoint_c=3.0)
    )
    if kind == "sudden-fog":
        # fog arrives on the wind at 03:00 with the air still far from saturation: the
        # rules cannot see it coming, and the observed-fog warning comes too late
        local = frame["time"].dt.tz_convert("Europe/London")
        at = (local.dt.date == evening + timedelta(days=1)) & local.dt.hour.between(3, 4)
        frame.loc[at, "visibility_m"] = 400.0
        frame.loc[at, "weather"] = "FG"
    return frame


@pytest.fixture(scope="module")
def month(tmp_path_factory):
    folder = tmp_path_factory.mktemp("replay")
    cfg = folder / "fogwatch.yaml"
    cfg.write_text(TWO_FIELDS)
    loaded = load(cfg)
    frames, expected = [], Contingency()
    days = 12
    for i, s in enumerate(loaded.config.sites):
        for d in range(days):
            kind = night_kind(i, d)
            frames.append(invented_night(s.id, FIRST + timedelta(days=d), kind))
            expected.hits += kind == "fog"
            expected.false_alarms += kind == "dew-only"
            expected.misses += kind == "sudden-fog"
            expected.correct_negatives += kind == "quiet"
    obs = pd.concat(frames, ignore_index=True)
    zone = loaded.config.sites[0].zone
    start = datetime.combine(FIRST, time(12, 0), zone)
    end = datetime.combine(FIRST + timedelta(days=days), time(11, 50), zone)
    result = replay(loaded, obs, start, end)
    return loaded, obs, result, expected, cfg, start, end


def test_invented_month_gives_the_expected_table_exactly(month):
    _, _, result, expected, *_ = month
    assert len(result.nights) == 24
    got = result.table("warning")
    assert (got.hits, got.false_alarms, got.misses, got.correct_negatives) == (
        expected.hits,
        expected.false_alarms,
        expected.misses,
        expected.correct_negatives,
    )


def test_leads_and_misses_are_explained(month):
    _, _, result, *_ = month
    lead = result.lead("warning")
    assert lead is not None and lead > 0
    misses = [n for n in result.nights if n.category("warning") == "miss"]
    assert misses and all(n.why_not for n in misses)
    assert any("radiation-fog-warning" in line for n in misses for line in n.why_not)


def test_replay_and_live_cycles_agree_event_for_event(month):
    loaded, obs, _, _, cfg, start, _ = month
    end = start + timedelta(days=2)
    replayed = replay(loaded, obs, start, end)
    service = Service(cfg)
    try:
        service.store.add_observations(obs)
        t = start
        while t <= end:
            service.poll_and_assess(t, source_ids=[])
            t += timedelta(minutes=10)
        live = service.outbox.events_between(
            start - timedelta(minutes=1), end + timedelta(minutes=1)
        )
    finally:
        service.close()
    key = lambda e: (e.time, e.site_id, e.hazard, e.type, e.level, e.id)  # noqa: E731
    assert sorted(map(key, live)) == sorted(map(key, replayed.events))
    assert len(live) > 4


def test_cli_scores_a_second_rule_set_side_by_side(month, tmp_path, capsys, monkeypatch):
    loaded, obs, *_ = month
    data = tmp_path / "month.csv"
    obs.assign(time=obs["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")).to_csv(data, index=False)
    rules_b = tmp_path / "rules-b"
    rules_b.mkdir()
    from notifier.core.config import default_rules_dir

    for f in default_rules_dir().glob("*.yaml"):
        text = f.read_text()
        if f.name == "fog.yaml":
            # a stricter warning: depression within 0.3 °C instead of 1 °C
            text = text.replace(
                "dewpoint_depression_c: {at_most: 1.0, margin: 0.5}\n"
                "              - depression_trend_c_per_h",
                "dewpoint_depression_c: {at_most: 0.3, margin: 0.5}\n"
                "              - depression_trend_c_per_h",
            )
            text = text.replace(
                "hours_to_fog: {at_most: 2.0, margin: 0.5}",
                "hours_to_fog: {at_most: 0.2, margin: 0.5}",
            )
        (rules_b / f.name).write_text(text)
    csv_path, png_path = tmp_path / "events.csv", tmp_path / "timeline.png"
    cfg = str(month[4])
    code = main(
        [
            "replay",
            cfg,
            "--data",
            str(data),
            "--from",
            "2026-10-01T11:00Z",
            "--to",
            "2026-10-05T10:50Z",
            "--rules-b",
            str(rules_b),
            "--json",
            "--csv",
            str(csv_path),
            "--png",
            str(png_path),
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    report = json.loads(out)
    assert set(report) == {"rules", "rules-b"}
    a, b = (
        report["rules"]["overall"]["median_lead_min"],
        report["rules-b"]["overall"]["median_lead_min"],
    )
    assert a["warning"] is not None
    assert b["warning"] is None or b["warning"] < a["warning"]  # stricter = later warnings
    assert csv_path.read_text().startswith("rules,time,site,hazard,type,level")
    assert png_path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # both rule sets are drawn: one column of panels each (10 in at 100 dpi per column)
    from matplotlib.image import imread

    assert imread(png_path).shape[1] == 2 * 1000


def test_cli_text_report(month, tmp_path, capsys):
    _, obs, *_ = month
    data = tmp_path / "month.csv"
    obs.assign(time=obs["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")).to_csv(data, index=False)
    code = main(
        [
            "replay",
            str(month[4]),
            "--data",
            str(data),
            "--from",
            "2026-10-01T11:00Z",
            "--to",
            "2026-10-04T10:50Z",
            "--deliver-to",
            str(tmp_path / "out"),
        ]
    )
    out, err = capsys.readouterr()
    assert code == 0, err
    for word in (
        "Alert timeline",
        "hits",
        "false alarms",
        "POD",
        "FAR",
        "CSI",
        "frequency bias",
        "median lead",
    ):
        assert word in out
    # no subscribers configured: everything goes to the console default, as live
    assert list((tmp_path / "out" / "rules" / "console").glob("*.eml"))
    assert "message(s) the subscribers would have received" in err


def test_cli_rejects_reversed_times(month, capsys):
    code = main(
        [
            "replay",
            str(month[4]),
            "--data",
            "x.csv",
            "--from",
            "2026-10-02T00:00Z",
            "--to",
            "2026-10-01T00:00Z",
        ]
    )
    assert code == 2 and "--to must be after --from" in capsys.readouterr().err


def test_rows_of_a_site_not_configured_change_nothing(month):
    # a history file may hold stations the configuration no longer has: they are left
    # out quietly (warnings are errors in this suite) and the scores stay the same
    loaded, obs, result, _, _, start, end = month
    stranger = obs[obs["site"] == obs["site"].iloc[0]].assign(site="zz-not-configured")
    again = replay(loaded, pd.concat([obs, stranger], ignore_index=True), start, end)
    assert [(e.id, e.type) for e in again.events] == [(e.id, e.type) for e in result.events]
    assert again.table("warning") == result.table("warning")


# -- the report: every rule set drawn, the bias per site ------------------------------------


def test_the_chart_draws_every_rule_set_in_its_own_column(month):
    from notifier.history.report import timeline_figure

    _, obs, result, *_ = month
    quiet = dataclasses.replace(result, label="rules-b", fog_level=np.zeros_like(result.fog_level))
    fig = timeline_figure([result, quiet], obs)
    axes = fig.axes
    assert len(axes) == 2 * len(result.site_ids)  # a panel per site per rule set
    grid = [axes[i * 2 : i * 2 + 2] for i in range(len(result.site_ids))]
    assert [ax.get_title() for ax in grid[0]] == ["rules", "rules-b"]

    def shaded(ax) -> int:  # vertices of the watch and warning bands drawn in a panel
        return sum(len(p.vertices) for c in ax.collections for p in c.get_paths())

    for row in grid:
        first, second = row
        assert shaded(first) > 0  # the month has alerts at every site
        assert shaded(second) == 0  # the second set's own (empty) periods, not the first's


def test_the_per_site_lines_carry_the_frequency_bias_the_json_has(month):
    from notifier.history.report import report_text, to_json

    _, _, result, *_ = month
    text = report_text([result])
    per_site = to_json([result])["rules"]["sites"]
    assert "Per site (rules): hits/misses/false alarms/quiet, POD, FAR, CSI, frequency bias" in text
    for sid, scores_ in per_site.items():
        (line,) = [ln for ln in text.splitlines() if re.match(rf"  {sid} +\d+/\d+/", ln)]
        bias = scores_["warning"]["bias"]
        assert bias is not None
        assert line.endswith(f"  bias {bias:.2f}"), line
        t = result.table("warning", sid)
        # (a+b)/(a+c), Wilks ch. 8
        assert bias == pytest.approx((t.hits + t.false_alarms) / (t.hits + t.misses), abs=1e-4)


# -- --deliver-to: what each subscriber would have received, as live -------------------------

ROUTED = """\
version: 1
sites:
  - {id: low-field, name: Low Field, lat: 52.3, lon: -1.8, timezone: Europe/London,
     exposure: open, use: farm}
  - {id: top-field, name: Top Field, lat: 52.4, lon: -1.9, timezone: Europe/London,
     exposure: open, use: farm}
channels:
  - {id: mail-ann, type: folder, path: live/ann}
  - {id: mail-bo, type: folder, path: live/bo}
  - {id: mail-desk, type: folder, path: live/desk}
  - {id: log, type: text, stdout: false, file: live/log.txt}
subscribers:
  - {id: ann, channel: mail-ann, address: ann@example.test, quiet_hours: "21:00-07:00"}
  - {id: bo, channel: mail-bo, address: bo@example.test, sites: [low-field],
     min_level: warning, hazards: [icing]}
  - {id: desk, channel: mail-desk, address: desk@example.test, sites: [top-field],
     quiet_hours: "20:00-08:00", warnings_in_quiet_hours: false}
  - {id: night-log, channel: log, address: ops-room, sites: [low-field]}
store: {url: "sqlite:///live.sqlite"}
"""


def _messages(folder):
    """{key: (subject, date, to, text)} of the .eml files in ``folder``."""
    import email
    from email import policy

    out = {}
    for path in folder.glob("*.eml"):
        msg = email.message_from_bytes(path.read_bytes(), policy=policy.default)
        body = msg.get_body(preferencelist=("plain",)).get_content()
        out[msg["X-Fogwatch-Delivery"]] = (msg["Subject"], msg["Date"], msg["To"], body)
    return out


def test_deliver_to_writes_what_each_subscriber_would_have_received_live(month, tmp_path):
    # the same history through the live service (routing, quiet hours, the dispatcher's
    # morning summaries) and through replay: the same messages, to the same people, at
    # the same times
    _, obs, _, _, _, start, _ = month
    end = start + timedelta(days=2)
    cfg = tmp_path / "fogwatch.yaml"
    cfg.write_text(ROUTED)
    loaded = load(cfg)
    replayed = replay(loaded, obs, start, end, deliver_to=tmp_path / "replay")

    clock = [start]
    mail = ("mail-ann", "mail-bo", "mail-desk")
    service = Service(cfg, channel_kwargs={c: {"clock": lambda: clock[0]} for c in mail})
    try:
        service.store.add_observations(obs)
        t = start
        while t <= end:
            clock[0] = t
            service.poll_and_assess(t, source_ids=[])
            service.deliver(t)
            t += timedelta(minutes=10)
    finally:
        service.close()

    for who in ("ann", "bo", "desk"):
        live = _messages(tmp_path / "live" / who)
        written = _messages(tmp_path / "replay" / who)
        assert bool(live) is (who != "bo"), who
        # replay's files are named by the time they go, then the live delivery's key
        assert {k.split("-", 1)[1]: v for k, v in written.items()} == live, who
    desk = _messages(tmp_path / "replay" / "desk")
    # desk holds even warnings overnight: they come as one summary per night at 08:00
    summaries = [v for k, v in desk.items() if "fw-sum-" in k]
    assert len(summaries) == 2
    assert all(v[0].startswith("Overnight:") and v[0].endswith("08:00 BST") for v in summaries)
    # bo follows only icing warnings at the low field: the month's fog is none of his
    assert not list((tmp_path / "replay" / "bo").glob("*.eml"))
    # a text channel's address is not an email address: the file has no To
    log = _messages(tmp_path / "replay" / "night-log")
    assert log and all(v[2] is None for v in log.values())
    total = sum(len(list((tmp_path / "replay" / w).glob("*.eml"))) for w in ("ann", "desk"))
    assert replayed.delivered == total + len(log)
    assert not (tmp_path / "replay" / "console").exists()  # no one but the subscribers


def test_the_one_pass_features_replay_as_one_call_per_time(month, monkeypatch):
    # Replay takes the features of a day of steps in one pass (notifier.engine.steps);
    # with that path closed, compute_features_at works them out one time at a time, as
    # before it. Both must give the same levels at every step, the same events and the
    # same night outcomes (the independent reference: the per-time feature code, which
    # test_replay_and_live_cycles_agree_event_for_event also holds live cycles to).
    from notifier.engine import steps

    loaded, obs, _, _, _, start, _ = month
    end = start + timedelta(days=3)
    one_pass = replay(loaded, obs, start, end)
    monkeypatch.setattr(steps, "MANY_TIMES", 10**9)
    per_time = replay(loaded, obs, start, end)
    np.testing.assert_array_equal(one_pass.fog_level, per_time.fog_level)
    key = lambda e: (e.time, e.site_id, e.hazard, e.type, e.level, tuple(e.rules))  # noqa: E731
    assert list(map(key, one_pass.events)) == list(map(key, per_time.events))
    assert len(one_pass.events) > 4
    assert [n.__dict__ for n in one_pass.nights] == [n.__dict__ for n in per_time.nights]
    assert (one_pass.fog_level > 0).any()
