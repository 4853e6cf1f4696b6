"""The evening outlook: one message per site for those who take watch-level news."""

from __future__ import annotations

import math
import re
from datetime import UTC, date, datetime, time, timedelta

import pytest

from notifier.service.cycle import Service, bot_subscriber_id
from tests.service.scene import CONFIG, HEADER, Scene, utc

OUTLOOK_AT = utc(2026, 11, 20, 17, 30)  # 17:30 GMT, the default outlook time
SUNSET = utc(2026, 11, 20, 16, 10)

WARNING_ONLY = """\
  - id: harbour
    name: Harbour Office
    channel: duty
    min_level: warning
bot:
"""


@pytest.fixture
def evening(scene: Scene) -> Scene:
    """A clear, calm evening cooling fast at the valley; a mild, cloudy one at the quay."""
    scene.config_path.write_text(CONFIG.replace("bot:\n", WARNING_ONLY, 1), encoding="utf-8")
    rows = [HEADER]
    t = utc(2026, 11, 20, 12, 0)
    while t <= OUTLOOK_AT:
        if t <= SUNSET:
            temp = 9.0 - 3.0 * (t - utc(2026, 11, 20, 12, 0)) / (SUNSET - utc(2026, 11, 20, 12, 0))
        else:  # Brunt's square-root cooling after sunset
            temp = 6.0 - 2.0 * math.sqrt((t - SUNSET).total_seconds() / 3600.0)
        stamp = f"{t:%Y-%m-%dT%H:%M:%SZ}"
        rows.append(f"zz-vale,{stamp},{temp:.2f},1.2,0.8,5,20000,")
        rows.append(f"zz-quay,{stamp},9.0,3.0,4.0,90,25000,")
        t += timedelta(minutes=10)
    (scene.drop / "evening.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return scene


def cooling_potential(
    temp_c: float, dewpoint_c: float, wind_ms: float, cloud_pct: float, sky_view: float,
    exposure_factor: float,
) -> float:  # fmt: skip
    """The feature ``cooling_potential`` worked out by hand from the scene's readings.

    Its definition (notifier/engine/catalog.py, ``FEATURES``; families.radiation):
    "0–1: radiative loss × light-wind factor × exposure factor", with the net long-wave
    loss from a Brutsaert clear sky, Unsworth–Monteith cloud and the exposure's sky view.
    The published pieces:

    - vapour pressure, CIMO Guide (WMO-No. 8) Annex 4.B Magnus form over water:
      e = 6.112 exp(17.62 Td / (243.12 + Td)) hPa;
    - clear sky, Brutsaert (1975): eps = 1.24 (e / T)^(1/7), T in K;
    - cloud, Unsworth & Monteith (1975): eps = (1 - 0.84 c) eps_clear + 0.84 c;
    - net loss with the surface at air temperature (Stefan–Boltzmann, sigma from CODATA
      2018): L = eps_s svf (1 - eps) sigma T^4, eps_s = 0.98.

    fogwatch's own settings (catalog.FeatureSettings, EXPOSURE_EFFECTS): 80 W/m² is full
    radiative cooling; wind gives full cooling at 2.5 m/s and none at 7 m/s, linearly
    between; the result is clipped to 0–1.
    """
    e_hpa = 6.112 * math.exp(17.62 * dewpoint_c / (243.12 + dewpoint_c))
    t_k = temp_c + 273.15
    clear = 1.24 * (e_hpa / t_k) ** (1 / 7)
    c = cloud_pct / 100
    sky = (1 - 0.84 * c) * clear + 0.84 * c
    loss_wm2 = 0.98 * sky_view * (1 - sky) * 5.670374419e-8 * t_k**4
    wind = min(1.0, max(0.0, (7.0 - wind_ms) / (7.0 - 2.5)))
    return min(1.0, max(0.0, min(1.0, loss_wm2 / 80.0) * wind * exposure_factor))


def _sunrise(lat: float, lon: float, day: date) -> datetime:
    """Sunrise by astral with the NOAA zenith of 90.833° (docs/references.md [Sun check])."""
    from astral import Observer
    from astral.sun import SunDirection, time_of_transit

    observer = Observer(latitude=lat, longitude=lon)
    return time_of_transit(observer, day, 90.833, SunDirection.RISING, with_refraction=False)


def outlook_rows(service: Service) -> list[tuple[str, str, str]]:
    out = []
    for row in service.outbox.deliveries():
        event, _ = service.outbox.event(row.event_id)
        if event.type == "outlook":
            out.append((row.subscriber, event.site_id, row.channel))
    return sorted(out)


def test_the_outlook_goes_per_site_to_watch_level_subscribers(evening: Scene):
    service = evening.service()
    service.bot_state.follow("guest-cy", "zz-quay", "watch", OUTLOOK_AT)
    service.bot_state.follow("op-ash", "zz-vale", "warning", OUTLOOK_AT)
    service.poll_and_assess(OUTLOOK_AT)
    queued = service.outlook(OUTLOOK_AT, ["zz-vale", "zz-quay"])
    rows = outlook_rows(service)
    assert rows == sorted(
        [
            ("desk", "zz-vale", "duty"),
            ("desk", "zz-quay", "duty"),
            ("crew", "zz-vale", "duty"),
            (bot_subscriber_id("guest-cy", "zz-quay"), "zz-quay", "botline"),
        ]
    )
    assert queued == len(rows)
    # the warning-only subscriber and the warning-only follower get none
    assert not any(sub == "harbour" for sub, _, _ in rows)
    # queued twice for the same moment is still one outlook each (idempotent)
    assert service.outlook(OUTLOOK_AT, ["zz-vale", "zz-quay"]) == 0


def test_the_outlook_text_names_minimum_dew_point_cooling_onset_icing_and_caution(
    evening: Scene,
):
    service = evening.service()
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-vale"])
    service.deliver(OUTLOOK_AT)
    text = evening.out("duty.txt")
    blocks = [b for b in text.split("─" * 40) if "Tonight's outlook" in b]
    assert len(blocks) == 2  # desk and crew, for the valley only
    vale = blocks[0]
    flat = " ".join(vale.split())  # the text channel wraps lines
    # with the site's other news of the moment, in one message
    assert re.search(r"Tonight's outlook(; [^·]+)? · Lower Vale Orchard · 17:30 GMT", flat)
    assert "Projected minimum -1.9 °C against a dew point of 1.2 °C (margin -3.1 °C)." in flat
    # the valley's 17:30 reading: 6.0 - 2.0 sqrt(1 h 20 min) °C as written (2 decimals),
    # dew point 1.2 °C, wind 0.8 m/s, cloud 5 %; valley: sky view 0.85, cooling × 1.2
    temp = round(6.0 - 2.0 * math.sqrt((OUTLOOK_AT - SUNSET).total_seconds() / 3600.0), 2)
    expected = cooling_potential(temp, 1.2, 0.8, 5.0, sky_view=0.85, exposure_factor=1.2)
    assert expected == 1.0  # 72 W/m² of 80, × 1.2 for the valley: more than full, clipped
    assert f"Cooling potential {expected:.2f} (strong)." in flat
    # 1 h 20 min after sunset the cooling curve has too little evening behind it to be
    # trusted (engine/projection.py: 4 readings over 2 h past the evening transition), so
    # no projected hour is given: the window is the hours around dawn, sunrise - 4 h to
    # + 1 h (radiation fog forms most often before dawn; common practice), with sunrise
    # from astral's NOAA events (docs/references.md [Sun check]), to the minute.
    onset = re.search(r"Onset window: most likely (\d\d):(\d\d) GMT to (\d\d):(\d\d) GMT", flat)
    assert onset is not None, flat
    sunrise = _sunrise(52.41, -2.37, OUTLOOK_AT.date() + timedelta(days=1))
    for (hh, mm), shift in zip(((1, 2), (3, 4)), (-4, 1), strict=True):
        shown = datetime.combine(sunrise.date(), time(int(onset[hh]), int(onset[mm])), UTC)
        assert abs(shown - (sunrise + timedelta(hours=shift))) <= timedelta(minutes=2)
    assert "Icing: likely" in flat
    assert "Fog chance tonight: high." in flat
    assert "automated estimate from site data, not an official forecast" in flat
    assert "North Quay Basin" not in text


def test_a_cloudy_breezy_sites_outlook_projects_from_the_afternoon(evening: Scene):
    service = evening.service()
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-quay"])
    service.deliver(OUTLOOK_AT)
    flat = " ".join(evening.out("duty.txt").split())
    assert "Tonight's outlook · North Quay Basin" in flat
    # the quay's reading: 9.0 °C, dew point 3.0 °C, wind 4.0 m/s, cloud 90 %;
    # waterside: sky view 1.0, cooling × 0.8
    cp = cooling_potential(9.0, 3.0, 4.0, 90.0, sky_view=1.0, exposure_factor=0.8)
    assert 0.14 < cp < 0.16  # 22 W/m² of 80, × 2/3 for the wind, × 0.8
    assert f"Cooling potential {cp:.2f} (weak)." in flat
    # No trusted cooling curve yet (see above): the minimum comes from the midday values
    # by Craddock & Pritchard (1951), T_min = 0.316 T12 + 0.548 Td12 - 1.24 + K
    # (docs/references.md [Craddock & Pritchard 1951], [C&P check]), with K from -2.2
    # (calm, clear) to +2.5 (windy, cloudy) by cooling potential, and the waterside
    # +1 K scaled by it (fogwatch's documented choices, engine/projection.py).
    minimum = 0.316 * 9.0 + 0.548 * 3.0 - 1.24 + (2.5 - 4.7 * cp) + 1.0 * cp
    assert 5.1 < minimum < 5.3
    shown = f"Projected minimum {minimum:.1f} °C against a dew point of 3.0 °C"
    assert f"{shown} (margin {minimum - 3.0:+.1f} °C)." in flat
    assert "Icing: unlikely." in flat
    # within 3 °C of the dew point: "some" (the outlook's crossover bands, common practice)
    assert "Fog chance tonight: some." in flat


def test_the_outlook_respects_a_hush(evening: Scene):
    service = evening.service()
    service.bot_state.mute("crew-bo", "zz-vale", OUTLOOK_AT + timedelta(hours=1), OUTLOOK_AT)
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-vale"])
    assert [sub for sub, _, _ in outlook_rows(service)] == ["desk"]


def test_an_outlook_without_data_says_so(scene: Scene):
    service = scene.service()
    service.outlook(OUTLOOK_AT, ["zz-quay"])
    service.deliver(OUTLOOK_AT)
    flat = " ".join(scene.out("duty.txt").split())
    assert "Not enough data tonight to project the minimum." in flat
    assert "Fog chance tonight: unknown." in flat
