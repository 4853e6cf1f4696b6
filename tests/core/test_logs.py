"""Log lines: ISO 8601 UTC time and level first; ``-v`` lowers the level as before."""

from __future__ import annotations

import io
import logging
import re
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime

import pytest

from notifier.core.logs import UTCFormatter, level_for, setup_logging

LINE = re.compile(
    r"(?P<time>\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z) (?P<level>[A-Z]+) (?P<name>\S+): (?P<msg>.*)"
)


def record(level: int, msg: str, created: float | None = None) -> logging.LogRecord:
    r = logging.LogRecord("notifier.service.scheduler", level, __file__, 1, msg, None, None)
    if created is not None:
        r.created = created
    return r


def test_a_line_is_iso_time_level_logger_message():
    before = datetime.now(UTC).replace(microsecond=0)
    line = UTCFormatter().format(record(logging.INFO, "fogwatch running: 2 site(s)"))
    after = datetime.now(UTC)
    m = LINE.fullmatch(line)
    assert m, line
    assert (m["level"], m["name"], m["msg"]) == (
        "INFO",
        "notifier.service.scheduler",
        "fogwatch running: 2 site(s)",
    )
    # the standard library's own ISO 8601 reader, which takes "Z" from Python 3.11 on
    when = datetime.fromisoformat(m["time"])
    assert when.utcoffset() is not None and when.utcoffset().total_seconds() == 0
    assert before <= when <= after


def test_the_time_is_utc_whatever_the_local_zone(monkeypatch):
    # a zone far from UTC: a formatter on local time would be hours off
    monkeypatch.setenv("TZ", "Pacific/Kiritimati")
    time.tzset()
    try:
        created = datetime(2026, 12, 4, 16, 40, 5, 900_000, tzinfo=UTC).timestamp()
        line = UTCFormatter().format(record(logging.WARNING, "x", created))
    finally:
        monkeypatch.undo()
        time.tzset()
    assert line == "2026-12-04T16:40:05Z WARNING notifier.service.scheduler: x"
    assert datetime.fromisoformat(LINE.fullmatch(line)["time"]) == datetime(
        2026, 12, 4, 16, 40, 5, tzinfo=UTC
    )


def test_a_traceback_follows_its_line():
    try:
        raise RuntimeError("store on fire")
    except RuntimeError:
        r = record(logging.ERROR, "job deliver failed")
        r.exc_info = sys.exc_info()
    first, *rest = UTCFormatter().format(r).splitlines()
    assert LINE.fullmatch(first)["level"] == "ERROR"
    assert rest[0] == "Traceback (most recent call last):"
    assert rest[-1] == "RuntimeError: store on fire"


@contextmanager
def bare_root() -> Iterator[logging.Logger]:
    """The root logger with no handlers, as a fresh process has it, restored after.

    Inside the test body: pytest hangs its capture handlers on the root for each phase.
    """
    root = logging.getLogger()
    saved = root.handlers[:], root.level
    root.handlers.clear()
    try:
        yield root
    finally:
        for h in root.handlers:
            h.close()
        root.handlers[:] = saved[0]
        root.setLevel(saved[1])


@pytest.mark.parametrize(
    ("verbosity", "level"),
    [(0, logging.WARNING), (1, logging.INFO), (2, logging.DEBUG), (5, logging.DEBUG)],
    ids=["default", "-v", "-vv", "-vvvvv"],
)
def test_setup_logging_sets_the_level_and_the_layout(verbosity, level):
    assert level_for(verbosity) == level
    out = io.StringIO()
    with bare_root() as root:
        setup_logging(verbosity, stream=out)
        assert root.level == level
        (handler,) = root.handlers
        assert isinstance(handler.formatter, UTCFormatter)

        log = logging.getLogger("notifier.test_logs")
        log.debug("detail")
        log.info("fogwatch stopped")
        log.warning("source far-feed: unavailable")
    lines = out.getvalue().splitlines()
    shown = {
        logging.WARNING: ["WARNING"],
        logging.INFO: ["INFO", "WARNING"],
        logging.DEBUG: ["DEBUG", "INFO", "WARNING"],
    }[level]
    assert [LINE.fullmatch(line)["level"] for line in lines] == shown
    for line in lines:
        datetime.fromisoformat(LINE.fullmatch(line)["time"])


def test_setup_logging_goes_to_stderr_by_default(capsys):
    with bare_root():
        setup_logging()
        logging.getLogger("notifier.test_logs").warning("to stderr")
    out, err = capsys.readouterr()
    assert out == ""
    assert LINE.fullmatch(err.strip())["msg"] == "to stderr"


def test_setup_logging_leaves_a_configured_root_alone():
    # as logging.basicConfig: an embedding program (or a test's capture) chose already
    mine = logging.StreamHandler(io.StringIO())
    with bare_root() as root:
        root.addHandler(mine)
        root.setLevel(logging.ERROR)
        setup_logging(2)
        assert root.handlers == [mine]
        assert root.level == logging.ERROR


def test_the_fogwatch_command_sets_up_logging_with_its_v_count(monkeypatch, tmp_path, capsys):
    from notifier.cli import main as cli

    seen: list[tuple[int, bool]] = []
    monkeypatch.setattr(
        cli, "setup_logging", lambda v, service, json_lines=False: seen.append((v, service))
    )
    missing = str(tmp_path / "missing.yaml")
    for argv in (["check", missing], ["-v", "check", missing], ["-vv", "run", missing]):
        cli.main(argv)  # fails on the missing file, after logging is set up
    capsys.readouterr()
    assert seen == [(0, False), (1, False), (2, True)]


def test_the_service_logs_alerts_by_default_and_keeps_scheduler_chatter_out_of_dash_v():
    # regression (issue 16): raised and cleared alerts were invisible at the default
    # level, and with -v nine lines in ten were APScheduler's runs of the config watch
    scheduler_log = logging.getLogger("apscheduler.executors.default")
    for verbosity, chatter_shown in [(0, False), (1, False), (2, True)]:
        out = io.StringIO()
        with bare_root():
            setup_logging(verbosity, stream=out, service=True)
            logging.getLogger("notifier.service.cycle").info("alert zz-vale: fog raised warning")
            scheduler_log.info('Running job "watch-config"')
            scheduler_log.warning("Run time of job was missed")
        text = out.getvalue()
        assert "alert zz-vale: fog raised warning" in text, verbosity
        assert ('Running job "watch-config"' in text) is chatter_shown, verbosity
        assert "Run time of job was missed" in text  # its warnings always show
    logging.getLogger("apscheduler").setLevel(logging.NOTSET)


def test_other_commands_stay_at_warning_by_default():
    out = io.StringIO()
    with bare_root() as root:
        setup_logging(0, stream=out)
        assert root.level == logging.WARNING
