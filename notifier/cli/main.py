"""The ``fogwatch`` command: argument parsing and exit codes only.

Each command is a thin call into the library; heavy libraries are imported inside the
handlers so that ``fogwatch --help`` answers at once.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from typing import Any, TypeAlias

from notifier import __version__
from notifier.core.errors import FogwatchError
from notifier.core.logs import setup_logging

__all__ = ["main"]

EXIT_CODES = """\
exit codes:
  0  success
  1  unexpected failure
  2  bad usage, or invalid config / rule file / input
  3  a data source was unavailable
  4  a delivery failed

This is an automated estimate from site data, not an official forecast. Follow
official warnings, the harbour authority, local codes and licensed practice.
"""

Handler = Callable[[argparse.Namespace], int]
# what add_subparsers returns; only the type checker can subscript it
_Subcommands: TypeAlias = "argparse._SubParsersAction[_Parser]"


class _Parser(argparse.ArgumentParser):
    """Bad usage: exit 2 with a one-line hint."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(2, f"{self.prog}: error: {message}\n(try '{self.prog} --help')\n")


def _cmd_check(args: argparse.Namespace) -> int:
    """Every problem of the config and its rule files in one report; exit 2 if any."""
    from notifier.core.config_file import check_config
    from notifier.core.errors import ConfigError
    from notifier.engine.rule_files import load_rule_set

    config, problems, warnings = check_config(args.config)
    for warning in warnings:
        print(f"warning: {warning}", file=sys.stderr)
    rules = None
    if config is not None:
        # a rule path that does not exist is one of the config's problems already
        paths = [p for p in config.rule_paths() if p.exists()]
        try:
            rules = load_rule_set(paths) if paths else None
        except ConfigError as exc:  # reported beside the config's own problems
            problems = problems + [p for p in exc.problems if p not in problems]
    if problems or config is None or rules is None:
        raise ConfigError(problems)
    from notifier.ingest.coverage import coverage_warnings

    # rules that can never fire at a site, for want of a column no source gives it
    gaps = coverage_warnings(config.sites, config.sources, rules.rules)
    for gap in gaps:
        print(f"warning: {gap}", file=sys.stderr)
    shown: list[object] = [*warnings, *gaps]
    if args.json:
        import json

        counts = {
            "sites": len(config.sites),
            "sources": len(config.sources),
            "rules": len(rules.rules),
            "rule_files": len(rules.files),
            "subscribers": len(config.subscribers),
        }
        print(
            json.dumps(
                {
                    "ok": True,
                    "config": str(config.path),
                    **counts,
                    "warnings": [str(w) for w in shown],
                },
                indent=2,
            )
        )
        return 0
    print(
        f"ok: {config.path}: {len(config.sites)} site(s), {len(config.sources)} source(s), "
        f"{len(rules.rules)} rule(s) from {len(rules.files)} file(s), "
        f"{len(config.subscribers)} subscriber(s)"
    )
    return 0


def _cmd_assess(args: argparse.Namespace) -> int:
    from notifier.cli import commands

    return commands.cli_assess(args)


def _cmd_explain(args: argparse.Namespace) -> int:
    from notifier.cli import commands

    return commands.cli_explain(args)


def _cmd_sources(args: argparse.Namespace) -> int:
    from notifier.cli import commands

    return commands.cli_sources(args)


def _cmd(name: str) -> Handler:
    def run(args: argparse.Namespace) -> int:
        from notifier.cli import commands

        return int(getattr(commands, name)(args))

    return run


def _cmd_replay(args: argparse.Namespace) -> int:
    from notifier.cli.replay_command import cli_replay

    return cli_replay(args)


def _cmd_learn(args: argparse.Namespace) -> int:
    from notifier.cli.learn_command import cli_learn

    return cli_learn(args)


def _cmd_demo(args: argparse.Namespace) -> int:
    from notifier.demo import play as demo

    return demo.main()


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", help="the fogwatch YAML config file")


def _add_at_and_json(p: argparse.ArgumentParser, at_help: str) -> None:
    p.add_argument("--at", metavar="TIME", help=f"{at_help} (ISO 8601; default now)")
    p.add_argument("--json", action="store_true", help="machine-readable output")


def build_parser() -> argparse.ArgumentParser:
    """The ``fogwatch`` parser; each subcommand's ``handler`` is what it runs."""
    parser = _Parser(
        prog="fogwatch",
        description=(
            "Watch site weather data for fog, freezing fog and icing; explain and deliver alerts."
        ),
        epilog=EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"fogwatch {__version__}")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
    parser.add_argument(
        "--log-format",
        choices=("text", "json"),
        default="text",
        help="log lines as text (default) or one JSON object each, for log collectors",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    # the order of the calls is the order of the commands in --help
    _add_reading_commands(sub)
    _add_service_commands(sub)
    _add_bot_commands(sub)
    _add_web_commands(sub)
    _add_history_commands(sub)
    return parser


def _add_reading_commands(sub: _Subcommands) -> None:
    """check, assess, explain, sources: look at the config, the data and the rules."""
    p = sub.add_parser("check", help="validate the config and every rule file")
    _add_common(p)
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=_cmd_check)

    p = sub.add_parser("assess", help="poll (or read --data files), evaluate, send nothing")
    _add_common(p)
    p.add_argument("--data", nargs="+", metavar="FILE", help="read these files instead")
    p.add_argument("--at", metavar="TIME", help="evaluation time (ISO 8601; default now)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=_cmd_assess)

    p = sub.add_parser("explain", help="every feature and rule for one site, and why")
    _add_common(p)
    p.add_argument("site", help="site id")
    p.add_argument("--data", nargs="+", metavar="FILE", help="read these files instead")
    p.add_argument("--at", metavar="TIME", help="evaluation time (ISO 8601; default now)")
    p.set_defaults(handler=_cmd_explain)

    p = sub.add_parser("sources", help="poll health of each source and its newest reading")
    _add_common(p)
    _add_at_and_json(p, "the time ages are counted to")
    p.set_defaults(handler=_cmd_sources)


def _add_service_commands(sub: _Subcommands) -> None:
    """once, run, status: the service itself, one cycle or unattended, and its state."""
    p = sub.add_parser("once", help="one full cycle: poll, assess, alert, deliver")
    _add_common(p)
    p.add_argument("--at", metavar="TIME", help="cycle time (ISO 8601; default now)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=_cmd("cli_once"))

    p = sub.add_parser("run", help="run unattended on a schedule (stop with Ctrl-C/SIGTERM)")
    _add_common(p)
    p.set_defaults(handler=_cmd("cli_run"))

    p = sub.add_parser("status", help="current levels, data age, source health, outbox")
    _add_common(p)
    _add_at_and_json(p, "the time ages are counted to")
    p.set_defaults(handler=_cmd("cli_status"))


def _cmd_secret(args: argparse.Namespace) -> int:
    import secrets

    from notifier.core.signing import format_secret

    # 32 bytes: within the 24 to 64 the Standard Webhooks specification recommends
    print(format_secret(secrets.token_bytes(32)))
    return 0


def _add_bot_commands(sub: _Subcommands) -> None:
    """ask, bot serve, secret: the messaging bot, from the shell or over HTTP, and the
    signing secrets it and the webhooks use."""
    p = sub.add_parser("ask", help="send one bot command from the shell")
    _add_common(p)
    p.add_argument("text", help="the command, e.g. 'status' or 'hush SITE for 2h'")
    p.add_argument(
        "--as", dest="sender", required=True, metavar="SENDER", help="the sender id to act as"
    )
    p.add_argument("--at", metavar="TIME", help=argparse.SUPPRESS)
    p.set_defaults(handler=_cmd("cli_ask"))

    p = sub.add_parser("bot", help="the messaging bot")
    bot_sub = p.add_subparsers(dest="bot_command", metavar="ACTION", parser_class=_Parser)
    q = bot_sub.add_parser("serve", help="serve the signed bot endpoint over HTTP")
    _add_common(q)
    q.add_argument("--host", default="127.0.0.1")
    q.add_argument("--port", type=int, default=8750)
    q.set_defaults(handler=_cmd("cli_bot_serve"))

    p = sub.add_parser(
        "secret",
        help="print a fresh signing secret for a webhook channel or the bot",
    )
    p.set_defaults(handler=_cmd_secret)


def _web_cmd(name: str) -> Handler:
    def run(args: argparse.Namespace) -> int:
        from notifier.cli import web_commands

        return int(getattr(web_commands, name)(args))

    return run


def _add_web_commands(sub: _Subcommands) -> None:
    """serve, init, schema: the operator's window and the starter files."""
    p = sub.add_parser("serve", help="the status page, /health, /metrics, CAP and the bot")
    _add_common(p)
    p.add_argument("--host", default=None, help="address (default web.host or 127.0.0.1)")
    p.add_argument("--port", type=int, default=None, help="port (default web.port or 8750)")
    p.add_argument("--at", metavar="TIME", help=argparse.SUPPRESS)
    p.set_defaults(handler=_web_cmd("cli_serve"))

    p = sub.add_parser("init", help="write a starter config, sample data and rules")
    p.add_argument("dir", nargs="?", default=".", help="folder to write into (default .)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=_web_cmd("cli_init"))

    p = sub.add_parser("schema", help="write JSON Schemas of the config and rule files")
    p.add_argument("--out", default=".", metavar="DIR", help="folder (default .)")
    p.set_defaults(handler=_web_cmd("cli_schema"))


def _add_history_commands(sub: _Subcommands) -> None:
    """replay, demo: the rules over past data, and an invented night."""
    p = sub.add_parser("replay", help="run the rules over history and score them")
    _add_common(p)
    p.add_argument(
        "--data",
        nargs="+",
        metavar="FILE",
        required=True,
        help="observation files (CSV, JSON, NDJSON, METAR)",
    )
    p.add_argument("--from", dest="start", required=True, metavar="TIME")
    p.add_argument("--to", dest="end", required=True, metavar="TIME")
    p.add_argument("--step", default="10min", help="clock step (default 10min)")
    p.add_argument("--rules-b", metavar="DIR", help="a second rule set to score beside")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.add_argument("--csv", metavar="FILE", help="write the events as CSV")
    p.add_argument("--png", metavar="FILE", help="write a timeline chart")
    p.add_argument("--deliver-to", metavar="DIR", help="write the messages as .eml files")
    p.add_argument("--model", metavar="FILE", help="a site model from fogwatch learn")
    p.set_defaults(handler=_cmd_replay)

    p = sub.add_parser("learn", help="fit each site's fog model on its own history")
    _add_common(p)
    p.add_argument("--data", nargs="+", metavar="FILE", required=True, help="the site history")
    p.add_argument("--out", required=True, metavar="MODEL.json", help="where to write the model")
    p.add_argument("--site", metavar="ID", help="only this site")
    p.add_argument(
        "--hours", type=float, default=6.0, help="look-ahead: fog now or within H h (default 6)"
    )
    p.add_argument("--labels", nargs="+", metavar="FILE", help="fog reports of a nearby station")
    p.add_argument("--from", dest="start", metavar="TIME", help="default: the first row")
    p.add_argument("--to", dest="end", metavar="TIME", help="default: the last row")
    p.set_defaults(handler=_cmd_learn)

    p = sub.add_parser("demo", help="one invented night at three invented sites")
    p.set_defaults(handler=_cmd_demo)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 2
    setup_logging(args.verbose, service=args.command == "run", json_lines=args.log_format == "json")
    handler: Any = args.handler
    try:
        return int(handler(args))
    except FogwatchError as exc:
        from notifier.core.redact import redact

        text = redact(str(exc))  # a URL's password or a value from the environment
        print(f"fogwatch: {text}" if "\n" not in text else text, file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        # the reader went away (e.g. `| head`): end quietly
        sys.stderr.close()
        return 0
