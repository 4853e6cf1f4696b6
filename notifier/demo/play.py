"""``fogwatch demo``: one invented night at the three invented demo sites.

The night plays through the very same service code as ``fogwatch run`` — the file drop,
the features and rules, the lifecycle, the outbox and the channels — with a simulated
clock stepping ten minutes at a time. No network and no server: emails are written as
``.eml`` files, and the webhook's transport writes each signed request body to a JSON
file instead of sending it. Everything lands in ``./fogwatch-demo/``.
"""

from __future__ import annotations

import json
import os
import shutil
import sys
from collections import Counter, defaultdict
from collections.abc import Callable
from datetime import date, datetime, time, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO
from zoneinfo import ZoneInfo

from notifier.demo.weather import NightSpec, simulate_night

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Config
    from notifier.service.cycle import Service

__all__ = ["DEMO_CONFIG", "DEMO_EVENING", "demo_nights", "demo_observations", "run_demo"]

DEMO_CONFIG = Path(__file__).resolve().parents[2] / "demo_sites.yaml"
DEMO_EVENING = date(2026, 11, 6)
# the demo's signing secrets (invented, published here: never use them for real)
DEMO_WEBHOOK_SECRET = "whsec_ZGVtbyB3ZWJob29rIGtleTogaW52ZW50ZWQsIG5vdCBzZWNyZXQ="
DEMO_BOT_SECRET = "whsec_ZGVtbyBib3Qga2V5OiBpbnZlbnRlZCwgbmV2ZXIgc2VjcmV0"
START, END = time(16, 0), time(9, 0)
STEP = timedelta(minutes=10)
# the showground's logger goes quiet for a while before dawn: silence is not safety
LOGGER_GAP = ("marrowby-showground", time(2, 30), time(4, 40))
BOT_SCRIPT = (
    ("duty-phone", "status"),
    ("duty-phone", "why skerrow-berth"),
    ("grower-17", "status hollin-orchard"),
    ("grower-17", "join ORCHARD-7"),
    ("grower-17", "follow marrowby-showground from warning"),
    ("grower-17", "hush hollin-orchard for 2h"),
    ("grower-17", "hush hollin-orchard for 2h for everyone"),
)


def demo_nights(config: Config) -> list[NightSpec]:
    """The invented weather of the demo night, one spec per demo site."""
    by_id = {s.id: s for s in config.sites}

    def spec(site_id: str, **kw: Any) -> NightSpec:
        s = by_id[site_id]
        return NightSpec(
            site=s.id,
            evening=DEMO_EVENING,
            timezone=s.timezone,
            lat=s.lat,
            lon=s.lon,
            start_local=time(10, 0),
            **kw,
        )

    return [
        # Valley orchard: clear, calm and cold. Cold air pools, fog forms and freezes
        # (rime on the trees, frost on the ground); the morning sun lifts it.
        spec(
            "hollin-orchard",
            day_max_c=7.5,
            sunset_temp_c=4.0,
            dewpoint_c=1.6,
            dewpoint_drift_c_per_h=-0.03,
            cooling_k_per_sqrt_h=1.9,
            cloud_pct=5.0,
            wind_ms=0.8,
            surface_offset_c=2.0,
            lift_local=time(7, 40),
        ),
        # Estuary berth: mild and cloudy with an offshore breeze; after 23:00 the wind
        # backs onshore and brings moist air over the cold estuary, and sea fog rolls in.
        # Before dawn the wind veers offshore again and drier air clears it.
        spec(
            "skerrow-berth",
            day_max_c=12.0,
            sunset_temp_c=11.0,
            dewpoint_c=9.4,
            dewpoint_drift_c_per_h=0.0,
            cooling_k_per_sqrt_h=0.35,
            cloud_pct=85.0,
            wind_ms=4.0,
            wind_dir_deg=110.0,
            water_temp_c=7.6,
            lift_local=time(4, 20),
            changes=(
                (time(23, 0), {"wind_dir_deg": 245.0, "dewpoint_shift_c": 1.4}),
                (time(4, 0), {"wind_dir_deg": 100.0, "dewpoint_shift_c": -2.5}),
            ),
        ),
        # Showground: clear and calm, textbook radiation fog after midnight; a breeze
        # before dawn mixes it out in time for the gates to open.
        spec(
            "marrowby-showground",
            day_max_c=11.0,
            sunset_temp_c=8.0,
            dewpoint_c=5.2,
            dewpoint_drift_c_per_h=-0.04,
            cooling_k_per_sqrt_h=1.5,
            cloud_pct=10.0,
            wind_ms=1.3,
            lift_local=time(5, 50),
            changes=((time(5, 50), {"wind_ms": 4.5, "cloud_pct": 60.0}),),
        ),
    ]


def demo_observations(config: Config) -> pd.DataFrame:
    """Every invented reading of the demo night (all sites, 10-minute steps)."""
    import pandas as pd

    frame = pd.concat([simulate_night(s) for s in demo_nights(config)], ignore_index=True)
    site, gap_from, gap_to = LOGGER_GAP
    zone = ZoneInfo(config.site(site).timezone)
    day = DEMO_EVENING + timedelta(days=1)
    lo = pd.Timestamp(datetime.combine(day, gap_from, zone))
    hi = pd.Timestamp(datetime.combine(day, gap_to, zone))
    silent = (frame["site"] == site) & (frame["time"] > lo) & (frame["time"] < hi)
    return frame[~silent].reset_index(drop=True)


class _FolderTransport:
    """A requests transport adapter that files each webhook request instead of sending.

    The webhook channel still builds, signs and posts the request as it would to a real
    receiver; only the last hop is a file.
    """

    def __init__(self, folder: Path):
        import requests.adapters

        self.folder = folder
        folder.mkdir(parents=True, exist_ok=True)
        outer = self

        class Adapter(requests.adapters.BaseAdapter):
            def send(self, request: Any, **kwargs: Any) -> Any:  # type: ignore[override]
                import requests

                key = request.headers.get("webhook-id", "delivery")
                raw = request.body if isinstance(request.body, bytes) else request.body.encode()
                # the three Standard Webhooks headers: id, timestamp and signature
                headers = {k: v for k, v in request.headers.items() if k.startswith("webhook-")}
                # the exact bytes signed, so a reader can check the signature
                record = {
                    "url": request.url,
                    "headers": headers,
                    "body": json.loads(raw),
                    "raw_body": raw.decode(),
                }
                path = outer.folder / f"{key}.json"
                path.write_text(json.dumps(record, indent=2, ensure_ascii=False))
                response = requests.Response()
                response.status_code = 200
                response.url = request.url
                response.request = request
                response._content = b'{"ok": true}'
                return response

            def close(self) -> None:
                pass

        self.adapter = Adapter()

    def session(self) -> Any:
        import requests

        session = requests.Session()
        session.mount("http://", self.adapter)
        session.mount("https://", self.adapter)
        return session


def _prepare(out: Path) -> Path:
    if out.exists():
        shutil.rmtree(out)
    (out / "drop").mkdir(parents=True)
    config_path = out / "demo_sites.yaml"
    shutil.copyfile(DEMO_CONFIG, config_path)
    # demo-only secrets, so the config can show the ${NAME} pattern a real one uses
    # (invented keys in the whsec_ form; `fogwatch secret` makes a real one)
    os.environ.setdefault("FOGWATCH_DEMO_WEBHOOK_SECRET", DEMO_WEBHOOK_SECRET)
    os.environ.setdefault("FOGWATCH_DEMO_BOT_SECRET", DEMO_BOT_SECRET)
    return config_path


def _write_drop(folder: Path, frame: pd.DataFrame, name: str) -> None:
    if not len(frame):
        return
    rows = frame.drop(columns=["source"]).assign(
        time=frame["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    )
    tmp = folder / f"{name}.part"
    rows.to_csv(tmp, index=False)
    tmp.rename(folder / name)  # complete files only: the drop ignores *.part


def _main_reason(event: Any, zone: str) -> str:
    """The most telling reason: a value against its threshold, not a yes/no."""
    from notifier.delivery.wording import gap_text

    if event.hazard == "data_gap" and event.gap_from is not None:
        return gap_text(event, zone)
    reasons = list(event.changes or event.reasons or ())
    if event.type == "observed":  # what was seen, a value before a yes/no
        for word in ("visibility", "surface", "air"):
            reasons.sort(key=lambda r, w=word: not r.startswith(w))  # type: ignore[misc]
            if reasons and reasons[0].startswith(word):
                return reasons[0]
        return (list(event.explanations) or reasons or [""])[0]
    compared = [
        r
        for r in reasons
        if any(sign in r for sign in "<>≤≥")
        and not any(word in r for word in ("sunrise", "sunset", "wind "))
    ]
    return (compared or reasons or [""])[0]


def run_demo(out: Path | None = None, stream: TextIO | None = None) -> dict[str, Any]:
    """Play the demo night; return a summary (also printed) for tests and people."""
    from notifier.service.cycle import Service

    stream = stream or sys.stdout
    out = (out or Path.cwd() / "fogwatch-demo").resolve()
    config_path = _prepare(out)
    transport = _FolderTransport(out / "webhook")
    service = Service(
        config_path, channel_kwargs={"harbour-desk": {"session": transport.session()}}
    )
    config = service.config
    zone = ZoneInfo(config.sites[0].timezone)
    readings = demo_observations(config)
    end = datetime.combine(DEMO_EVENING + timedelta(days=1), END, zone)

    def say(text: str = "") -> None:
        print(text, file=stream)

    say("fogwatch demo — one invented night at three invented sites")
    say(f"{DEMO_EVENING:%A %d %B %Y}, 16:00 to 09:00 local; output in {out}")
    say("")
    names = {s.id: s.name for s in config.sites}
    subs = {s.id: s.name or s.id for s in config.subscribers}
    try:
        events_seen = _play_night(service, readings, end, out, subs, say)
        service.deliver(end + timedelta(minutes=1))
        sent_by = _sent_by(service)
        answers = _ask_bot(service, end, say)
    finally:
        service.close()
    files = _say_what_was_sent(out, sent_by, subs, say)
    return {
        "events": events_seen,
        "sent_by": sent_by,
        "bot": answers,
        "files": files,
        "out": out,
        "names": names,
    }


def _play_night(
    service: Service,
    readings: pd.DataFrame,
    end: datetime,
    out: Path,
    subs: dict[str, str],
    say: Callable[[str], None],
) -> list[Any]:
    """Step the clock to ``end``: drop each step's readings, run a cycle, tell the events."""
    from notifier.delivery.messages import headline

    config = service.config
    zone = end.tzinfo
    t = datetime.combine(DEMO_EVENING, START, zone)
    outlook_at = datetime.combine(DEMO_EVENING, time(17, 30), zone)
    events_seen: list[Any] = []
    previous = readings["time"].min() - timedelta(seconds=1)
    while t <= end:
        step = readings[(readings["time"] > previous) & (readings["time"] <= t)]
        _write_drop(out / "drop", step, f"loggers-{t.astimezone(zone):%m%d-%H%M}.csv")
        previous = t
        report = service.poll_and_assess(t)
        if t == outlook_at:  # with the cycle's own news of a site: one message
            service.outlook(t, [s.id for s in config.sites])
            say(f"{t:%a %H:%M}  evening outlook sent for every site")
        service.deliver(t)
        for ev in report.events:
            events_seen.append(ev)
            site = config.site(ev.site_id)
            who = sorted(
                {
                    subs.get(d.subscriber, d.subscriber)
                    for d in service.outbox.deliveries()
                    if d.event_id == ev.id
                }
            )
            why = _main_reason(ev, site.timezone)
            say(f"{t.astimezone(zone):%a %H:%M}  {headline(ev, site, site.timezone)}")
            if why:
                say(f"            because {why}")
            say(f"            → {', '.join(who) if who else 'no one subscribed'}")
        t += STEP
    return events_seen


def _sent_by(service: Service) -> dict[str, Counter[str]]:
    """How many messages of each kind (and delivery status) each subscriber got."""
    sent_by: dict[str, Counter[str]] = defaultdict(Counter)
    for row in service.outbox.deliveries():
        event, _ = service.outbox.event(row.event_id)
        if event.type == "outlook" or event.hazard == "data_gap":
            label = event.type.replace("_", " ")
        else:
            label = f"{event.type} {event.hazard}"
        sent_by[row.subscriber][f"{label} ({row.status})"] += 1
    return sent_by


def _ask_bot(
    service: Service, end: datetime, say: Callable[[str], None]
) -> list[tuple[str, str, str]]:
    """The bot's answers to the scripted messages, as at the end of the night."""
    from notifier.bot.grammar import handle
    from notifier.service.botbackend import ServiceBackend

    say("")
    say("Bot (as it would answer messages):")
    answers = []
    for sender, text in BOT_SCRIPT:
        reply = handle(ServiceBackend(service, end), sender, text, end)
        answers.append((sender, text, reply))
        say(f"  {sender}> {text}")
        for line in reply.splitlines():
            say(f"    {line}")
    return answers


def _say_what_was_sent(
    out: Path, sent_by: dict[str, Counter[str]], subs: dict[str, str], say: Callable[[str], None]
) -> dict[str, list[str]]:
    """Print the tally per subscriber and where the files went; return the file names."""
    say("")
    say("What was sent to whom:")
    for sub_id, counts in sent_by.items():
        say(f"  {subs.get(sub_id, sub_id)}:")
        for label, n in sorted(counts.items()):
            say(f"    {n} × {label}")
    files = {
        "emails": sorted(p.name for p in (out / "mail").glob("*.eml")),
        "webhooks": sorted(p.name for p in (out / "webhook").glob("*.json")),
    }
    say("")
    say(f"Emails (.eml, with charts): {len(files['emails'])} in {out / 'mail'}")
    say(f"Webhook bodies (.json):     {len(files['webhooks'])} in {out / 'webhook'}")
    say(f"Duty log (plain text):      {out / 'alerts.txt'}")
    say("")
    say("Automated estimate from invented data, not an official forecast. Follow official")
    say("warnings, the harbour authority, local codes and licensed practice.")
    return files


def main() -> int:
    run_demo()
    return 0
