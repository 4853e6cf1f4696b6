"""Every assessment and lifecycle step the test suite makes, checked against the oracles.

``install()`` (called by ``tests/conftest.py`` before any test module is imported)
wraps ``notifier.engine.assess.assess_times`` (which ``assess`` calls) and
``notifier.engine.lifecycle.step``: each call also runs the per-site version kept in
``tests/engine/oracle_assess.py`` / ``oracle_lifecycle.py`` on the same inputs and fails
the test if anything differs — the assessments (levels, hazards, reasons, expected
times, sustain levels, features, rule results), the arrays the lifecycle reads, and
the states and events. So every scene of the suite (tests/engine, tests/delivery, the
demo night through the service, replay, the web and bot tests) is a check that the
array versions give exactly what the per-site ones give. (A replay's batch of many
times is checked at a few of them, spread over the batch; every step is checked.)
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from functools import wraps
from typing import Any

import numpy as np

CHECKS = {"assess": 0, "step": 0}  # how many calls were checked (read by test_oracle)
SAMPLED = 6  # at most this many times of one call are checked


def _same_float(a: Any, b: Any) -> bool:
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return bool(a == b)


def site_assessment_parts(sa: Any) -> dict[str, Any]:
    """Everything an assessment hands out, as plain values (NaN compared as equal)."""
    hazards = {
        h: (
            ha.hazard,
            ha.level,
            ha.kind,
            ha.eta,
            ha.eta_method,
            tuple(ha.kinds),
            list(ha.rules),
            list(ha.reasons),
            list(ha.explanations),
            list(ha.safety_refs),
        )
        for h, ha in sa.hazards.items()
    }
    results = [
        (r.rule.id, r.applies, r.fires, r.sustains, r.held_now, r.hold_met, r.missing)
        for r in sa.results
    ]
    return {
        "site": sa.site.id,
        "time": sa.time,
        "level": sa.level,
        "stale": sa.stale,
        "projection_method": sa.projection_method,
        "last_time": sa.last_time,
        "projection": sa.projection,
        "hazards": hazards,
        "sustain": dict(sa.sustain),
        "results": results,
        "drivers": getattr(sa.features, "drivers", ""),
    }


def assert_same_assessments(new: Sequence[Any], old: Sequence[Any]) -> None:
    assert len(new) == len(old)
    for a, b in zip(new, old, strict=True):
        pa, pb = site_assessment_parts(a), site_assessment_parts(b)
        assert pa == pb, (pa["site"], pa["time"], pa, pb)
        fa, fb = dict(a.features), dict(b.features)
        assert fa.keys() == fb.keys()
        assert all(_same_float(fa[k], fb[k]) for k in fa), pa["site"]
    assert_arrays_match_objects(new)


def assert_arrays_match_objects(assessments: Sequence[Any]) -> None:
    """The arrays the lifecycle reads (:class:`SiteLevels`) against the same values
    worked out from each site's assessment object."""
    from notifier.engine.assessed import Assessments, levels_of

    if not isinstance(assessments, Assessments):
        return
    arrays = assessments.site_levels
    objects = levels_of(list(assessments))
    assert list(arrays.ids) == list(objects.ids)
    np.testing.assert_array_equal(arrays.stale, objects.stale)
    n = len(assessments)
    zeros = np.zeros(n, np.int8)
    for name in ("levels", "sustain", "seen"):
        mine, theirs = getattr(arrays, name), getattr(objects, name)
        for h in set(mine) | set(theirs):
            np.testing.assert_array_equal(
                mine.get(h, zeros), theirs.get(h, zeros), err_msg=f"{name}[{h}]"
            )
    # a time that can be told as sooner is found, to the millisecond; elsewhere the
    # candidate may say anything (it only picks the sites worth a closer look)
    for h, exact in objects.sooner.items():
        told = ~np.isnan(exact)
        if told.any():
            found = arrays.sooner[h][told]
            np.testing.assert_allclose(found, exact[told], rtol=0, atol=1e-3, err_msg=h)


def events_as_dicts(events: Sequence[Any]) -> list[dict[str, Any]]:
    return [e.to_dict() for e in events]


def assert_same_step(new: tuple[Any, Any], old: tuple[Any, Any]) -> None:
    states, events = new
    o_states, o_events = old
    assert events_as_dicts(events) == events_as_dicts(o_events)
    assert states == o_states


def _checked_assess_times(real: Callable[..., Any]) -> Callable[..., Any]:
    @wraps(real)
    def checked(
        rules: Any,
        sites: Any,
        obs: Any,
        times: Any,
        settings: Any = None,
        stale_after_min: float | None = None,
        cache: dict[float, Any] | None = None,
        feature_cache: Any = None,
    ) -> Any:
        from notifier.engine.assessment import STALE_AFTER_MIN
        from tests.engine.oracle_assess import oracle_assess_times

        stale = STALE_AFTER_MIN if stale_after_min is None else stale_after_min
        tables: dict[float, Any] = {} if cache is None else cache
        found = real(rules, sites, obs, times, settings, stale, tables, feature_cache)
        # a long batch of times (replay) is checked at a few of them, spread over it
        # (each time's result is that of the time alone); the same feature tables
        # (the feature code is not what is checked here)
        picked = sorted({round(j * (len(times) - 1) / (SAMPLED - 1)) for j in range(SAMPLED)})
        picked = picked if len(times) > SAMPLED else list(range(len(times)))
        expected = oracle_assess_times(
            rules,
            sites,
            obs,
            [times[k] for k in picked],
            settings,
            stale,
            dict(tables),
            feature_cache,
        )
        for k, old in zip(picked, expected, strict=True):
            assert_same_assessments(found[k], old)
        CHECKS["assess"] += 1
        return found

    checked.__oracle_checked__ = True  # type: ignore[attr-defined]
    return checked


def _checked_step(real: Callable[..., Any]) -> Callable[..., Any]:
    @wraps(real)
    def checked(previous: Mapping[Any, Any], assessments: Any, now: Any, settings: Any) -> Any:
        from tests.engine.oracle_lifecycle import oracle_step

        found = real(previous, assessments, now, settings)
        assert_same_step(found, oracle_step(previous, assessments, now, settings))
        CHECKS["step"] += 1
        return found

    checked.__oracle_checked__ = True  # type: ignore[attr-defined]
    return checked


def install() -> None:
    import notifier.engine.assess as assess_module
    import notifier.engine.lifecycle as lifecycle_module

    if not getattr(assess_module.assess_times, "__oracle_checked__", False):
        assess_module.assess_times = _checked_assess_times(assess_module.assess_times)
    if not getattr(lifecycle_module.step, "__oracle_checked__", False):
        lifecycle_module.step = _checked_step(lifecycle_module.step)
