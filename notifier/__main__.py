"""``python -m notifier`` is the same as the ``fogwatch`` command."""

from notifier.cli.main import main

if __name__ == "__main__":
    raise SystemExit(main())
