"""The bot's view of the running service: sites, stored status, follows and mutes."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

from notifier.bot.grammar import SiteStatus
from notifier.service.access import Access
from notifier.service.cycle import Service

__all__ = ["ServiceBackend"]


class ServiceBackend:
    """``BotBackend`` over a ``Service``: reads the last stored assessment of each site."""

    def __init__(self, service: Service, now: datetime):
        self.service = service
        self.now = now

    @property
    def config(self):  # type: ignore[no-untyped-def]
        return self.service.config

    def site_names(self) -> dict[str, str]:
        return {s.id: s.name for s in self.config.sites}

    def site_timezone(self, site_id: str) -> str:
        return self.config.site(site_id).timezone

    def _access(self) -> Access:
        return Access.of(self.config, self.service.bot_state)

    def is_known(self, sender: str) -> bool:
        return sender in self._access().listed or self.service.bot_state.is_member(sender)

    def is_operator(self, sender: str) -> bool:
        return self._access().is_operator(sender)

    def sites_for(self, sender: str) -> list[str]:
        return list(self._access().sites(sender))

    def join(self, sender: str, code: str) -> str | None:
        """Grants what the code names (a site id, ``tag:NAME`` or ``all``); a site's code
        also follows that site."""
        scope = self.config.bot.join_codes.get(code)
        if scope is None:
            return None
        state = self.service.bot_state
        state.add_member(sender, self.now, via=f"code for {scope}")
        state.grant(sender, scope, self.now)
        if scope in self.site_names():
            state.follow(sender, scope, "watch", self.now)
        return scope

    def status(self, site_ids: Sequence[str]) -> list[SiteStatus]:
        from notifier.core.freshness import freshness, when_text
        from notifier.core.timefmt import parse_iso

        snaps = self.service.outbox.snapshots(site_ids)  # only these put into words
        names = self.site_names()
        newest: dict[str, datetime] = {}
        for site, _source, t in self.service.store.newest_readings():
            newest[site] = max(t, newest.get(site, t))
        stale_after_min = self.config.alerts.stale_after / 60.0
        out = []
        for sid in site_ids:
            zone = self.config.site(sid).timezone
            snap = snaps.get(sid)
            stored = parse_iso(snap[2].get("data", {}).get("last_time")) if snap else None
            last = max([t for t in (newest.get(sid), stored) if t is not None], default=None)
            # the age as of now, not as of the last assessment
            fresh = freshness(last, self.now, zone, stale_after_min)
            age = fresh.age_min if last is not None else None
            if snap is None:  # no level to doubt yet; readings, if any, are shown
                text = fresh.text if last is not None else ""
                out.append(SiteStatus(sid, names[sid], "none", "not assessed yet", age, text))
                continue
            when, level, payload = snap
            parts = []
            for h in payload.get("hazards", []):
                eta = h.get("eta")
                text = f"{h['hazard']} {h['level']} ({h['kind']})"
                if eta:
                    text += f" from {when_text(parse_iso(eta), self.now, zone)}"
                parts.append(text)
            f = payload.get("features", {})
            if f.get("temp_c") is not None and f.get("dewpoint_c") is not None:
                parts.append(f"T {f['temp_c']:.1f} °C, dew point {f['dewpoint_c']:.1f} °C")
            summary = "; ".join(parts) or "nothing expected"
            out.append(SiteStatus(sid, names[sid], level, summary, age, fresh.text, fresh.stale))
        return out

    def reasons(self, site_id: str) -> list[str]:
        snap = self.service.outbox.snapshots([site_id]).get(site_id)
        if snap is None:
            return []
        out: list[str] = []
        for h in snap[2].get("hazards", []):
            out.extend(f"{h['hazard']}: {r}" for r in h.get("reasons", []))
        return out

    def followed(self, sender: str) -> list[str]:
        ids = [site for _, site, _ in self.service.bot_state.follows(sender)]
        for sub in self.config.subscribers:
            if sender in sub.senders:
                ids.extend(s.id for s in self.config.sites_matching(sub.sites))
        # not a follow of a site since removed from the config, or no longer granted
        allowed = set(self._access().sites(sender))
        return [sid for sid in dict.fromkeys(ids) if sid in allowed]

    def follow(self, sender: str, site_id: str, min_level: str) -> None:
        self.service.bot_state.follow(sender, site_id, min_level, self.now)

    def unfollow(self, sender: str, site_id: str) -> bool:
        return self.service.bot_state.unfollow(sender, site_id)

    def mute(self, sender: str, site_id: str, until: datetime, everyone: bool = False) -> None:
        self.service.bot_state.mute(sender, site_id, until, self.now, everyone=everyone)

    def unmute(self, sender: str, site_id: str, everyone: bool = False) -> bool:
        return self.service.bot_state.unmute(sender, site_id, self.now, everyone=everyone)
