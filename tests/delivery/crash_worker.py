"""Run by test_crash.py in a subprocess: dispatch a config's outbox until nothing is due.

``python -m tests.delivery.crash_worker CONFIG NOW DELAY_S`` prints ``ready`` once the
service is loaded, then delivers at the simulated time NOW. Each webhook POST is followed
by a pause of DELAY_S before the dispatcher may record it, which widens the window
between "the receiver has it" and "the outbox says sent" where the test's SIGKILL lands.
"""

from __future__ import annotations

import sys
import time
from datetime import datetime
from typing import Any

import requests

from notifier.service.cycle import Service


class SlowSession(requests.Session):
    def __init__(self, delay_s: float):
        super().__init__()
        self.delay_s = delay_s

    def post(self, *args: Any, **kwargs: Any) -> requests.Response:  # type: ignore[override]
        response = super().post(*args, **kwargs)
        time.sleep(self.delay_s)
        return response


def main(argv: list[str]) -> int:
    config, at, delay_s = argv[0], datetime.fromisoformat(argv[1]), float(argv[2])
    service = Service(config, channel_kwargs={"hook": {"session": SlowSession(delay_s)}})
    print("ready", flush=True)
    try:
        # like a running service: keep delivering while anything is pending; what a
        # killed predecessor still holds becomes due once its claim lapses (a fraction
        # of a second here), so wait for that rather than stop (bounded, in case)
        give_up = time.monotonic() + 30.0
        while service.outbox.backlog().get("pending") and time.monotonic() < give_up:
            if not service.deliver(at).sent:
                time.sleep(0.05)
    finally:
        service.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
