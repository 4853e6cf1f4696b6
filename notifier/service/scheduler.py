"""APScheduler wiring for ``fogwatch run``: the jobs only call the service.

The web app (``web:``) and the bot on Matrix (``matrix:``) run beside the jobs, each
in a thread of its own, and stop before the store closes.

Jobs: one poll per source at its interval (each poll is followed by an assessment and
the lifecycle), delivery of the outbox, the evening outlook per time zone at the
configured local time, a data-health check, housekeeping, and a watch on the config and
rule files that reloads them when they change. Every job coalesces missed runs, runs
one instance at a time, and has a misfire grace time. Local times go through each
site's zone (zoneinfo), so they stay right across daylight-saving changes.

Instances sharing a PostgreSQL store (``instance: {index, count}``) each poll their
share of the sources and assess their share of the sites; the outlooks and
housekeeping run on the leader only (``Service.leads``), and an instance that is not
the leader asks again each time they are due, so it takes over when the leader stops.
"""

from __future__ import annotations

import logging
import signal
import threading
from collections.abc import Callable
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from apscheduler.schedulers.base import BaseScheduler

    from notifier.service.cycle import Service

__all__ = ["build_scheduler", "run_forever"]

log = logging.getLogger(__name__)

CONFIG_WATCH_S = 5.0
_RELOADING = threading.Lock()  # SIGHUP and the file watch may ask at the same moment


def _now() -> datetime:
    return datetime.now(UTC)


def _guarded(name: str, fn: Callable[[], Any]) -> Callable[[], None]:
    """A job that fails logs why and lets the next run go on."""

    def job() -> None:
        try:
            fn()
        except Exception:
            log.exception("job %s failed; it will run again at its next time", name)

    job.__name__ = f"job_{name}"
    return job


def build_scheduler(
    service: Service, scheduler: BaseScheduler | None = None, clock: Callable[[], datetime] = _now
) -> BaseScheduler:
    """Add every job for ``service`` to ``scheduler`` (a BlockingScheduler by default).

    Called again on a reload: a job whose trigger is unchanged keeps its next run time
    (only its function is replaced), a changed one is replaced, a job no longer
    configured is removed.
    """
    from apscheduler.schedulers.blocking import BlockingScheduler
    from apscheduler.triggers.cron import CronTrigger
    from apscheduler.triggers.interval import IntervalTrigger

    from notifier.core.partition import share

    config = service.config
    sched = scheduler or BlockingScheduler(timezone=UTC)
    defaults = {
        "coalesce": True,
        "max_instances": 1,
        "misfire_grace_time": int(config.schedule.misfire_grace),
    }

    existing = {job.id: job for job in sched.get_jobs()}
    wanted: set[str] = set()

    def add(job_id: str, fn: Callable[[], Any], trigger: Any, **kwargs: Any) -> None:
        wanted.add(job_id)
        old = existing.get(job_id)
        if old is not None and _same_trigger(old.trigger, trigger):
            # a reload: the job keeps its schedule (restarting the timer on every reload
            # would starve a job whose interval is longer than the time between reloads)
            old.modify(func=_guarded(job_id, fn), **defaults)
            return
        if old is not None:
            sched.remove_job(job_id)  # (a scheduler not yet started keeps duplicates)
        sched.add_job(
            _guarded(job_id, fn),
            trigger,
            id=job_id,
            name=job_id,
            **defaults,
            **kwargs,
        )

    for source in share(config.sources, config.instance.index, config.instance.count):

        def poll(sid: str = source.id) -> object:
            return service.poll_and_assess(clock(), source_ids=[sid])

        add(
            f"poll:{source.id}",
            poll,
            IntervalTrigger(seconds=source.interval),
            # the scheduler keeps real time even when the service is handed another clock
            next_run_time=_now(),
        )
    # sites without any source still need assessing (their data gap must be reported)
    add(
        "assess",
        lambda: service.poll_and_assess(clock(), source_ids=[]),
        IntervalTrigger(seconds=config.schedule.evaluate_every),
    )
    add(
        "deliver",
        lambda: service.deliver(clock()),
        IntervalTrigger(seconds=config.schedule.deliver_every),
    )
    if config.schedule.outlook_local_time:
        hour, minute = (int(x) for x in config.schedule.outlook_local_time.split(":"))
        for zone in sorted({s.timezone for s in config.sites}):
            ids = [s.id for s in config.sites if s.timezone == zone]

            def outlook(ids: list[str] = ids) -> object:
                return service.outlook(clock(), ids) if service.leads() else 0

            # a cron trigger in the site's own zone: 17:30 stays 17:30 across DST
            add(
                f"outlook:{zone}",
                outlook,
                CronTrigger(hour=hour, minute=minute, timezone=zone),
            )
    add(
        "health",
        lambda: service.health(clock()),
        IntervalTrigger(seconds=config.schedule.health_every),
    )
    add(
        "housekeeping",
        lambda: service.housekeeping(clock()) if service.leads() else None,
        IntervalTrigger(seconds=config.schedule.housekeeping_every),
    )
    add(
        "watch-config",
        lambda: _reload_if_changed(service, sched, clock),
        IntervalTrigger(seconds=CONFIG_WATCH_S),
    )
    for job_id in set(existing) - wanted:  # a source or a time zone no longer configured
        sched.remove_job(job_id)
    return sched


def _same_trigger(old: Any, new: Any) -> bool:
    """The same kind, interval or fields, and zone: a schedule a reload may keep."""
    return (
        type(old) is type(new)
        and str(old) == str(new)
        and str(getattr(old, "timezone", "")) == str(getattr(new, "timezone", ""))
    )


def _reload_if_changed(
    service: Service, sched: BaseScheduler, clock: Callable[[], datetime]
) -> None:
    if service.files_changed():
        reload(service, sched, clock)


def reload(service: Service, sched: BaseScheduler, clock: Callable[[], datetime]) -> bool:
    """Reload config and rules; on failure keep the running ones and say why."""
    with _RELOADING:
        ok, message = service.reload()
        if not ok:
            log.error("reload failed, keeping the running config: %s", message)
            return False
        build_scheduler(service, sched, clock)  # unchanged jobs keep their next run
    log.warning("reloaded %s", service.config.path)
    return True


def run_forever(service: Service) -> int:
    """Run until SIGTERM or SIGINT; SIGHUP reloads. Finishes the job in flight."""
    sched = build_scheduler(service)
    stopping: list[threading.Thread] = []

    def stop(signum: int, _frame: Any) -> None:
        if stopping:
            return
        log.info("signal %s: finishing the job in flight, then stopping", signum)
        service.stop()  # a delivery run ends after the message it is sending
        # shutdown waits for running jobs, so it cannot run inside this handler
        stopper = threading.Thread(target=sched.shutdown, kwargs={"wait": True}, daemon=True)
        stopping.append(stopper)
        stopper.start()

    def hup(_signum: int, _frame: Any) -> None:
        threading.Thread(target=reload, args=(service, sched, _now), daemon=True).start()

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, hup)
    from notifier.service.matrixbot import start_matrix
    from notifier.service.webapp import start_web

    web = start_web(service)  # the web app beside the jobs when the config has web:
    matrix = start_matrix(service)  # the bot on Matrix when the config has matrix:
    log.info(
        "fogwatch running: %d site(s), %d source(s)",
        len(service.config.sites),
        len(service.config.sources),
    )
    try:
        sched.start()
    finally:
        for stopper in stopping:
            stopper.join(timeout=60)  # the jobs in flight end before the store closes
        if web is not None:
            web.close()
        if matrix is not None:
            matrix.stop()  # the sync in flight is cancelled; an answer being sent ends first
        service.close()
        log.info("fogwatch stopped")
    return 0
