"""The bot tests' shared fixtures: a real Matrix homeserver for the session."""

from tests.bot.matrix_server import homeserver

__all__ = ["homeserver"]
