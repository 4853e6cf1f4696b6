"""Scenario nights for every default rule, each with a near-miss that must not fire.

The scenarios are invented; what each one must trigger follows from published
definitions (named beside each case) or is marked common practice.
"""

from __future__ import annotations

from datetime import timedelta
from types import SimpleNamespace

import pandas as pd
import pytest

from notifier.demo.weather import NightSpec, simulate_night
from notifier.engine.assess import assess
from tests.engine.scenes import EVENING, RULES, site, steady, utc


def fired(sites, obs, at):
    return {
        a.site.id: {r.rule.id for r in a.results if r.fires} for a in assess(RULES, sites, obs, at)
    }


def levels(sites, obs, at):
    return {
        a.site.id: {h: x.level for h, x in a.hazards.items()} for a in assess(RULES, sites, obs, at)
    }


# -- radiation fog ---------------------------------------------------------------------


def _night(s, **kw):
    return simulate_night(
        NightSpec(site=s.id, evening=EVENING, timezone=s.timezone, lat=s.lat, lon=s.lon, **kw)
    )


def test_clear_calm_night_that_saturates_gives_watch_then_warning():
    # Clear sky, light wind, moist air: the textbook radiation-fog night (EUMETrain
    # conceptual model of radiation fog).
    s = site("clear-field")
    obs = _night(s)
    evening = fired([s], obs, utc(2026, 10, 14, 17, 0))["clear-field"]
    assert "radiation-fog-watch" in evening
    assert "radiation-fog-warning" not in evening
    late = fired([s], obs, utc(2026, 10, 14, 21, 0))["clear-field"]
    assert "radiation-fog-warning" in late
    night = levels([s], obs, utc(2026, 10, 15, 1, 0))["clear-field"]
    assert night["fog"] == "warning"


def test_same_night_overcast_and_windy_stays_quiet():
    # Overcast sky returns long-wave and 6 m/s mixes the layer: no radiation fog
    # (common practice: radiation fog needs wind below ~3 m/s and little low cloud).
    s = site("cloudy-field")
    obs = _night(s, cloud_pct=95.0, wind_ms=6.0, cooling_k_per_sqrt_h=0.4, dewpoint_c=4.0)
    for at in (utc(2026, 10, 14, 17), utc(2026, 10, 14, 22), utc(2026, 10, 15, 3)):
        assert not levels([s], obs, at)["cloudy-field"].get("fog"), at


def test_forest_site_beside_open_site_cools_less():
    # The same evening air over an open field and under a canopy: the canopy hides the
    # sky (sky-view factor), so the net long-wave loss and the cooling potential are
    # lower and the projected minimum higher (Oke, Boundary Layer Climates, from memory).
    open_site = site("open-field", exposure="open")
    forest = site("wood-edge", exposure="forest")
    at = utc(2026, 10, 14, 16, 0)
    frames = []
    for s in (open_site, forest):
        frames.append(_night(s, dewpoint_c=4.0, sunset_temp_c=9.5))
    obs = pd.concat(frames)
    result = {a.site.id: a for a in assess(RULES, [open_site, forest], obs, at)}
    f_open, f_forest = result["open-field"].features, result["wood-edge"].features
    assert f_forest["net_longwave_wm2"] < 0.6 * f_open["net_longwave_wm2"]
    assert f_forest["cooling_potential"] < f_open["cooling_potential"]
    assert f_forest["projected_min_temp_c"] > f_open["projected_min_temp_c"]
    assert "radiation-fog-watch" in {r.rule.id for r in result["open-field"].results if r.fires}
    assert "radiation-fog-watch" not in {r.rule.id for r in result["wood-edge"].results if r.fires}


def test_valley_site_gets_the_valley_watch_on_a_calm_clear_night():
    valley = site("low-orchard", exposure="valley")
    obs = _night(valley, dewpoint_c=5.5)
    assert "valley-fog-watch" in fired([valley], obs, utc(2026, 10, 14, 19, 30))["low-orchard"]
    windy = _night(valley, dewpoint_c=5.5, wind_ms=6.5, cloud_pct=90.0, cooling_k_per_sqrt_h=0.5)
    assert (
        "valley-fog-watch" not in fired([valley], windy, utc(2026, 10, 14, 19, 30))["low-orchard"]
    )


# -- sea and advection fog ---------------------------------------------------------------

HARBOUR = dict(exposure="coast", use="port", onshore_from_deg=200, onshore_to_deg=320)


@pytest.mark.parametrize(
    ("wind_dir", "expected"),
    [(250.0, "warning"), (90.0, None)],
    ids=["onshore-over-cold-water", "offshore-same-air"],
)
def test_harbour_with_cold_water(wind_dir, expected):
    # Cho et al. 2000: sea fog is frequent where the dew point exceeds the water
    # temperature by more than 2 °C; it needs the air to come off the water.
    s = site("quay-two", **HARBOUR)
    at = utc(2026, 5, 20, 4, 0)
    obs = steady(
        s.id,
        at,
        temp_c=12.6,
        dewpoint_c=11.8,
        water_temp_c=8.5,
        wind_ms=4.0,
        wind_dir_deg=wind_dir,
        cloud_pct=100.0,
        visibility_m=8000.0,
    )
    got = levels([s], obs, at)[s.id].get("fog")
    assert got == expected
    if expected:
        assert {"sea-fog-watch", "sea-fog-warning"} <= fired([s], obs, at)[s.id]


def test_sea_fog_rule_does_not_apply_inland():
    s = site("inland", exposure="open")
    at = utc(2026, 5, 20, 4, 0)
    obs = steady(
        s.id,
        at,
        temp_c=12.6,
        dewpoint_c=11.8,
        water_temp_c=8.5,
        wind_ms=4.0,
        wind_dir_deg=250.0,
        cloud_pct=100.0,
    )
    assert not {"sea-fog-watch", "sea-fog-warning"} & fired([s], obs, at)[s.id]


def test_steam_fog_over_much_warmer_water():
    # Saunders 1964: steam fog needs the water 5–15 °C warmer than the air.
    s = site("river-wharf", exposure="waterside", use="port")
    at = utc(2026, 1, 20, 7, 0)
    cold = steady(
        s.id, at, temp_c=-9.0, dewpoint_c=-11.0, water_temp_c=4.0, wind_ms=2.0, cloud_pct=20.0
    )
    assert "steam-fog-watch" in fired([s], cold, at)[s.id]
    mild = steady(
        s.id, at, temp_c=1.0, dewpoint_c=-1.0, water_temp_c=4.0, wind_ms=2.0, cloud_pct=20.0
    )
    assert "steam-fog-watch" not in fired([s], mild, at)[s.id]


def test_steam_fog_in_a_gale():
    # Saunders 1964 saw sea smoke in winds from calm to gale (from memory): a strong wind
    # carries the steam fog onto the quay, it does not stop it
    s = site("river-wharf", exposure="waterside", use="port")
    at = utc(2026, 1, 20, 7, 0)
    gale = steady(
        s.id, at, temp_c=-9.0, dewpoint_c=-11.0, water_temp_c=4.0, wind_ms=18.0, cloud_pct=20.0
    )
    assert "steam-fog-watch" in fired([s], gale, at)[s.id]


# -- observed fog --------------------------------------------------------------------------


def test_observed_dense_fog():
    # WMO: fog is visibility below 1000 m; 200 m is "thick" fog in UK practice.
    s = site("gate-field")
    at = utc(2026, 11, 3, 6, 0)
    obs = steady(
        s.id,
        at,
        temp_c=4.0,
        dewpoint_c=3.9,
        wind_ms=0.5,
        cloud_pct=100.0,
        visibility_m=150.0,
        weather="FG",
    )
    got = fired([s], obs, at)[s.id]
    assert {"observed-fog", "dense-fog"} <= got
    a = assess(RULES, [s], obs, at)[0]
    assert a.hazards["fog"].eta == at  # observed: it is here now


def _dip(s, at, low_reports, step_min):
    """Clear reports (16 km) every ``step_min`` for 3 h, the last ``low_reports`` at 800 m."""
    obs = steady(
        s.id, at, step_min=step_min, temp_c=2.0, dewpoint_c=1.0, wind_ms=5.0, cloud_pct=100.0
    )
    vis = [16100.0] * len(obs)
    for k in range(1, low_reports + 1):
        vis[-k] = 800.0
    return obs.assign(visibility_m=vis)


@pytest.mark.parametrize("exposure", ["open", "valley", "forest", "waterside", "coast", "urban"])
@pytest.mark.parametrize("step_min", [10, 60])
def test_one_low_report_warns_at_once_at_every_exposure(exposure, step_min):
    # Fog is visibility below 1000 m (WMO-No. 8): one report of 800 m raises the
    # observed-fog warning at once, at the coast as inland; on hourly reports a wait for
    # a second report would be an hour's delay.
    s = site("gate-field", exposure=exposure)
    at = utc(2026, 3, 11, 19, 0)
    got = fired([s], _dip(s, at, 1, step_min), at)[s.id]
    assert "observed-fog" in got
    # and a clear last report does not: the rule reads the newest report
    clear = _dip(s, at, 1, step_min)
    clear.loc[clear.index[-1], "visibility_m"] = 16100.0
    assert "observed-fog" not in fired([s], clear, at)[s.id]


def test_dense_fog_at_the_coast_warns_at_once():
    # Dense fog (200 m, UK "thick" fog, from memory) needs no confirmation: one report of
    # 150 m at a coast site warns.
    s = site("pier-end", exposure="coast")
    at = utc(2026, 3, 11, 19, 0)
    obs = _dip(s, at, 1, 60)
    obs.loc[obs.index[-1], "visibility_m"] = 150.0
    got = fired([s], obs, at)[s.id]
    assert "dense-fog" in got


def test_mist_is_not_fog():
    # 1500 m with BR is mist (WMO-No. 306 FM 15: BR 1000–5000 m), not fog.
    s = site("gate-field")
    at = utc(2026, 11, 3, 1, 0)
    obs = steady(
        s.id,
        at,
        temp_c=4.0,
        dewpoint_c=3.4,
        wind_ms=3.0,
        cloud_pct=100.0,
        visibility_m=1500.0,
        weather="BR",
    )
    got = fired([s], obs, at)[s.id]
    assert "observed-mist" in got
    assert not {"observed-fog", "dense-fog"} & got


# -- icing -----------------------------------------------------------------------------------


def test_freezing_night_gives_freezing_fog():
    # FZFG: fog at temperatures below 0 °C (WMO-No. 306 FM 15).
    s = site("north-paddock")
    obs = _night(s, day_max_c=3.0, sunset_temp_c=0.5, dewpoint_c=-1.0, dewpoint_drift_c_per_h=0.0)
    watch_at = utc(2026, 10, 14, 18, 30)
    assert "freezing-fog-watch" in fired([s], obs, watch_at)[s.id]
    late = utc(2026, 10, 15, 2, 0)
    got = fired([s], obs, late)[s.id]
    assert "freezing-fog-observed" in got
    assert levels([s], obs, late)[s.id]["icing"] == "warning"


def _dewpoint_of_ice_saturated_air(temp_c: float) -> float:
    """The dew point (over water) of air saturated over ice at ``temp_c``, from MetPy's
    saturation vapour pressures over ice and water (an outside reference)."""
    import metpy.calc as mpcalc
    from metpy.units import units

    e_ice = mpcalc.saturation_vapor_pressure(units.Quantity(temp_c, "degC"), phase="solid")
    return float(mpcalc.dewpoint(e_ice).m_as("degC"))


@pytest.mark.parametrize(
    ("temp_c", "saturated_over", "watch"),
    [
        (-10.0, "ice", False),  # RH over water about 90 %: hoar frost, not fog
        (-14.0, "ice", False),
        (-10.0, "water", True),  # supercooled droplets can form: freezing fog likely
    ],
)
def test_freezing_fog_watch_needs_air_saturated_over_water(temp_c, saturated_over, watch):
    # Fog is droplets: below 0 °C, air saturated only over ice (its dew point over water
    # 1.3 °C below the air at −10 °C, MetPy) deposits frost instead (WMO-No. 8 defines
    # relative humidity over water)
    s = site("upper-meadow")
    at = utc(2026, 1, 20, 2, 0)  # night
    dew = _dewpoint_of_ice_saturated_air(temp_c) if saturated_over == "ice" else temp_c - 0.2
    obs = steady(s.id, at, hours=12.0, temp_c=temp_c, dewpoint_c=dew, wind_ms=1.5, cloud_pct=100.0)
    assert ("freezing-fog-watch" in fired([s], obs, at)[s.id]) is watch


def test_mild_fog_night_has_no_icing():
    s = site("south-paddock")
    obs = _night(s)
    assert "icing" not in levels([s], obs, utc(2026, 10, 15, 2, 0))[s.id]


@pytest.mark.parametrize(
    ("dewpoint", "expect_frost"),
    [(-2.5, True), (-9.0, False)],
    ids=["moist-air-deposits-frost", "dry-air-frost-point-below-surface"],
)
def test_hoar_frost_needs_the_surface_below_the_frost_point(dewpoint, expect_frost):
    # Hoar frost deposits where the surface is at or below the frost point and below
    # 0 °C (Karlsson 2001). Surface −3 °C: with dew point −2.5 the frost point is about
    # −2.2 °C (above the surface); with dew point −9 it is about −8 °C (below it).
    s = site("deck-a", use="port")
    at = utc(2026, 12, 10, 5, 0)
    obs = steady(
        s.id, at, temp_c=-0.5, dewpoint_c=dewpoint, surface_temp_c=-3.0, wind_ms=1.0, cloud_pct=0.0
    )
    got = fired([s], obs, at)[s.id]
    assert ("hoar-frost" in got) == expect_frost


# -- data health ---------------------------------------------------------------------------


def test_feed_that_stopped_is_reported_and_fog_rules_stay_unknown():
    s = site("far-field")
    stop = utc(2026, 10, 14, 20, 0)
    obs = _night(s).pipe(lambda f: f[f["time"] <= pd.Timestamp(stop)])
    at = stop + timedelta(hours=4)
    a = assess(RULES, [s], obs, at)[0]
    assert a.hazards["data_gap"].level == "watch"
    assert a.stale
    # silence is not safety: the fog rules say they cannot judge, not that all is well
    fog_warning = next(r for r in a.results if r.rule.id == "radiation-fog-warning")
    assert not fog_warning.fires
    assert "dewpoint_depression_c" in fog_warning.missing


def test_fresh_feed_has_no_data_gap():
    s = site("near-field")
    at = utc(2026, 10, 14, 21, 0)
    obs = _night(s)
    assert "data-gap" not in fired([s], obs, at)[s.id]


@pytest.mark.parametrize(
    ("stale_after_min", "age_min", "gap"),
    [(30, 45, True), (90, 45, False), (90, 100, True), (120, 100, False)],
    ids=["short-setting-45min", "default-45min", "default-100min", "long-setting-100min"],
)
def test_one_setting_drives_the_stale_flag_and_the_data_gap_rule(stale_after_min, age_min, gap):
    # regression (issue 16): alerts.stale_after only set the flag while the data-gap rule
    # tested a fixed 90 min; now both follow the one setting (assess's stale_after_min)
    s = site("far-field")
    stop = utc(2026, 10, 14, 20, 0)
    obs = _night(s).pipe(lambda f: f[f["time"] <= pd.Timestamp(stop)])
    a = assess(RULES, [s], obs, stop + timedelta(minutes=age_min), stale_after_min=stale_after_min)
    a = a[0]
    assert a.stale is gap
    assert ("data_gap" in a.hazards) is gap
    assert a.features["data_stale"] == float(gap)


def test_site_that_never_reported_is_a_data_gap():
    s = site("silent")
    at = utc(2026, 10, 14, 21, 0)
    a = assess(RULES, [s], pd.DataFrame(), at)[0]
    assert a.hazards["data_gap"].level == "watch"
    assert a.level == "watch"


def test_eta_beyond_the_horizon_is_none_not_an_overflow():
    from notifier.engine.assess import _eta

    rule = next(r for r in RULES.rules if r.id == "radiation-fog-watch")
    at = utc(2026, 11, 20, 3)
    fitted = (8.0, 1.5, at - timedelta(hours=8))  # a cooling curve fitted tonight

    def scene(**features: float) -> SimpleNamespace:
        return SimpleNamespace(features={"hours_to_sunrise": 5.0, **features}, projection=fitted)

    assert _eta("fog", rule, scene(hours_to_fog=3.0e15), at) == (None, "")
    assert _eta("fog", rule, scene(hours_to_fog=2.0), at) == (
        at + timedelta(hours=2),
        "cooling-curve",
    )
    # icing from a curve that would need longer than the horizon: no time, no overflow
    frost = next(r for r in RULES.rules if r.id == "ground-frost-watch")
    far = SimpleNamespace(
        features={"temp_c": 5.0, "frost_point_c": -1.0, "hours_to_sunrise": 5.0},
        projection=(8.0, 1.0e-12, at - timedelta(hours=8)),
    )
    assert _eta("icing", frost, far, at) == (None, "")


# -- saturated air that is not fog, and the coast without a water temperature --------------


@pytest.mark.parametrize(
    ("visibility", "cloud", "warn"),
    [
        ((3000.0, 1500.0), 0.0, True),
        ((20000.0, 20000.0), 0.0, False),
        ((1500.0, 800.0), 95.0, False),
    ],
    ids=["clear-sky-visibility-falling", "clear-sky-visibility-20km-steady", "overcast"],
)
def test_saturated_air_is_a_radiation_fog_warning_only_when_it_looks_like_fog(
    visibility, cloud, warn
):
    # Saturated air with the visibility at 5 km or more and not falling is not fog
    # (WMO-No. 8: fog < 1 km, mist to 5 km): a wet sensor or cloud-base air after rain.
    # Under 6 okta or more the ground cannot cool radiatively: not radiation fog
    # (common practice).
    s = site("wet-field")
    at = utc(2026, 10, 14, 23, 0)
    obs = steady(
        s.id,
        at,
        temp_c=(6.6, 6.2),
        dewpoint_c=6.0,
        wind_ms=1.0,
        cloud_pct=cloud,
        visibility_m=visibility,
    )
    got = fired([s], obs, at)[s.id]
    assert ("radiation-fog-warning" in got) == warn


COAST = dict(exposure="coast", use="port")


@pytest.mark.parametrize(
    ("wind", "visibility", "water", "expected"),
    [
        (4.0, (9000.0, 2500.0), None, "warning"),
        (4.0, (20000.0, 20000.0), None, None),
        (11.0, (9000.0, 2500.0), None, None),
        (0.5, (9000.0, 2500.0), None, None),
    ],
    ids=[
        "saturating-visibility-falling",
        "visibility-steady-20km",
        "gale-lifts-it-to-stratus",
        "calm",
    ],
)
def test_coast_without_water_temperature_reads_fog_from_the_air(wind, visibility, water, expected):
    # No water temperature: near-saturated air still closing, on a 2–8 m/s wind, with
    # the visibility under the 5 km of mist and falling (WMO-No. 8; wind limits from
    # memory, common practice). By day as well as by night.
    s = site("harbour-mouth", **COAST)
    at = utc(2026, 5, 20, 13, 0)
    values: dict = dict(temp_c=(12.8, 12.1), dewpoint_c=11.8, wind_ms=wind, cloud_pct=100.0)
    if visibility is not None:
        values["visibility_m"] = visibility
    obs = steady(s.id, at, **values)
    assert levels([s], obs, at)[s.id].get("fog") == expected


def test_a_coast_site_with_a_water_temperature_is_left_to_the_sea_fog_rules():
    s = site("harbour-buoy", **COAST)
    at = utc(2026, 5, 20, 13, 0)
    obs = steady(
        s.id,
        at,
        temp_c=(12.8, 12.1),
        dewpoint_c=11.8,
        wind_ms=4.0,
        water_temp_c=13.0,
        cloud_pct=100.0,
        visibility_m=(9000.0, 2500.0),
    )
    assert not {"coast-fog-watch", "coast-fog-warning"} & fired([s], obs, at)[s.id]


# -- rain, and low cloud coming down ---------------------------------------------------------


@pytest.mark.parametrize(
    ("precip", "warn"),
    [(None, True), ([0.0] * 21 + [0.6, 0.3, 0.0, 0.0], False), ([0.8] + [0.0] * 24, True)],
    ids=["no-rain-gauge", "rain-in-the-last-3h", "rain-long-before"],
)
def test_rain_with_no_cloud_report_is_no_radiation_fog_warning(precip, warn):
    # With no cloud report, rain in the last 3 h says the sky is overcast and the air is
    # wet from the rain, not cooled to its dew point: no radiation-fog warning (common
    # practice; docs/references.md [Tardif & Rasmussen 2007] for fog in rain being a
    # cloud-base-lowering fog, not a radiation fog). A site without a rain gauge, or dry
    # for 3 h, is judged as before.
    s = site("wet-field-2")
    at = utc(2026, 10, 14, 23, 0)
    values: dict = dict(
        temp_c=(6.6, 6.2), dewpoint_c=6.0, wind_ms=1.0, visibility_m=(3000.0, 1500.0)
    )
    if precip is not None:
        values["precip_mm"] = pd.Series(precip).to_numpy()
    obs = steady(s.id, at, hours=4.0, **values)
    assert ("radiation-fog-warning" in fired([s], obs, at)[s.id]) == warn


@pytest.mark.parametrize(
    ("ceiling", "visibility", "wind", "expected"),
    [
        ((500.0, 70.0), None, 6.0, {"stratus-lowering-watch"}),
        ((600.0, 20.0), (4000.0, 1200.0), 6.0,
         {"stratus-lowering-watch", "stratus-lowering-warning"}),
        ((600.0, 20.0), None, 6.0, {"stratus-lowering-watch"}),
        ((400.0, 400.0), (4000.0, 1200.0), 6.0, set()),
        ((600.0, 20.0), (4000.0, 1200.0), 14.0, set()),
        (None, (4000.0, 1200.0), 6.0, set()),
    ],
    ids=["lowering-to-70m", "lowering-to-20m-visibility-falling",
         "lowering-to-20m-no-visibility-sensor", "steady-stratus-400m", "gale",
         "no-ceiling-data"],
)  # fmt: skip
def test_a_lowering_cloud_base_brings_fog_down_whatever_the_wind_up_to_10_ms(
    ceiling, visibility, wind, expected
):
    # docs/references.md [Tardif & Rasmussen 2007]: cloud-base lowering is a frequent way
    # fog forms, in winds that rule radiation fog out. Watch at ≤ 150 m (500 ft) and
    # lowering ≥ 90 m in 3 h, warning at ≤ 60 m (200 ft) still lowering with the
    # visibility under 2 km and falling (500 ft LIFR from memory; the rest common
    # practice). Saturated air under a steady 400 m base is stratus, not fog; no ceiling
    # data leaves the rules as they were.
    s = site("inland-ridge")
    at = utc(2026, 11, 20, 14, 0)  # by day: neither is a night-only rule
    values: dict = dict(temp_c=8.0, dewpoint_c=7.6, wind_ms=wind, cloud_pct=100.0)
    if ceiling is not None:
        values["ceiling_m"] = ceiling
    if visibility is not None:
        values["visibility_m"] = visibility
    obs = steady(s.id, at, **values)
    got = fired([s], obs, at)[s.id]
    assert got & {"stratus-lowering-watch", "stratus-lowering-warning"} == expected


def test_a_monthly_water_climatology_lets_the_sea_fog_rules_judge():
    # Moist onshore air over water colder than its dew point (Cho et al. 2000, sea fog):
    # with no water sensor the site's monthly climatology stands in (common practice).
    clim = tuple([8.0] * 12)
    s = site("harbour-clim", **COAST, onshore_from_deg=180.0, onshore_to_deg=270.0,
             water_temp_monthly_c=clim)  # fmt: skip
    at = utc(2026, 5, 20, 13, 0)
    obs = steady(s.id, at, temp_c=12.0, dewpoint_c=10.5, wind_ms=4.0, wind_dir_deg=220.0)
    got = fired([s], obs, at)[s.id]
    assert "sea-fog-watch" in got
    bare = site("harbour-bare", **COAST, onshore_from_deg=180.0, onshore_to_deg=270.0)
    assert "sea-fog-watch" not in fired([bare], obs.assign(site=bare.id), at)[bare.id]
