"""The command line: parse, call the library, print with rich, map errors to exit codes.

Each command lives in its own module under ``flowgauge._cli`` and is imported only when it
is run, so ``flowgauge --help`` stays fast. No computation happens here.
"""

from __future__ import annotations

import importlib
import sys
import warnings

import click

from . import __version__
from .errors import FlowgaugeError

# command name -> ("module:attribute" of a click command, one-line help for the listing)
COMMANDS = {
    "networks": ("flowgauge._cli.networks:networks", "List the bundled networks."),
    "powerflow": ("flowgauge._cli.powerflow:powerflow", "Solve the AC power flow of a network's base case."),
    "opf": ("flowgauge._cli.opf:opf", "Solve the AC (or DC) optimal power flow of a network's base case."),
    "splits": ("flowgauge._cli.splits:splits", "Build, verify, show and publish frozen splits."),
    "validate": ("flowgauge._cli.submission:validate", "Check a predictions file against its schema and split."),
    "score": ("flowgauge._cli.score:score", "Score a predictions file and write a scorecard."),
    "baseline": ("flowgauge._cli.score:baseline", "Write the predictions of a reference proxy for a split."),
    "demo": ("flowgauge._cli.score:demo", "Run the baselines on the demo network, score and compare them."),
    "rank": ("flowgauge._cli.rank:rank", "Rebuild (or verify) the ranking tables and leaderboard page."),
}


class _LazyGroup(click.Group):
    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(COMMANDS)

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        target = COMMANDS.get(name)
        if target is None:
            return None
        module, attr = target[0].split(":")
        return getattr(importlib.import_module(module), attr)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        # The listing uses the one-line help above, so it imports no command module.
        with formatter.section("Commands"):
            formatter.write_dl([(name, COMMANDS[name][1]) for name in sorted(COMMANDS)])


@click.group(cls=_LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="flowgauge")
def cli() -> None:
    """flowgauge: frozen test sets and a deterministic scorer for learned AC optimal power flow."""


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    # Warnings meant for people (a file missing costs, say): one line, no source location.
    click.echo(f"Warning: {_printable(str(message))}", err=True)


def _printable(message: str) -> str:
    """An error message as printed: control characters and lone surrogates escaped (text from
    files and submitters reaches messages), each line cut to a length a terminal can show."""
    from ._io import clip_text, safe_text
    return "\n".join(clip_text(safe_text(line), MESSAGE_LINE_CHARS) for line in message.split("\n"))


MESSAGE_LINE_CHARS = 1000


def main(argv: list[str] | None = None) -> int:
    """Entry point: the one place that turns errors into messages and exit codes."""
    warnings.showwarning = _show_warning
    try:
        cli.main(args=argv, prog_name="flowgauge", standalone_mode=False)
    except FlowgaugeError as exc:
        click.echo(f"Error: {_printable(str(exc))}", err=True)
        return exc.exit_code
    except click.exceptions.Abort:
        click.echo("Aborted.", err=True)
        return 130
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except KeyboardInterrupt:
        click.echo("Interrupted.", err=True)
        return 130
    return 0


def run() -> None:  # console script
    sys.exit(main())
