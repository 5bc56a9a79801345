"""The ``attrib`` command line: argument parsing, output and exit codes over the Python API.

Each command lives in its own module of this package and is registered in ``_COMMANDS``.
"""

from __future__ import annotations

import importlib
import sys

import click
import duckdb

from attrib import __version__
from attrib.errors import AttribError

EXIT_CODES = """\b
Exit codes:
  0  success
  1  a check failed (over budget) or an unexpected error
  2  wrong usage: unknown option, bad value, options that do not fit together
  3  input problem: missing file, unknown format, bad field mapping, naive timestamps
  4  store problem: cannot open, locked by another process, newer schema
"""

# command name -> "module:function" in this package
_COMMANDS: dict[str, str] = {}
_COMMANDS["routes"] = "rank:routes_cmd"
_COMMANDS["templates"] = "rank:templates_cmd"
_COMMANDS["route"] = "rank:route_cmd"
_COMMANDS["nplus1"] = "rank:nplus1_cmd"
_COMMANDS["ingest"] = "ingest:ingest_command"
_COMMANDS["coverage"] = "coverage:coverage_command"
_COMMANDS["fingerprint"] = "fingerprint:fingerprint_command"
_COMMANDS["whatif"] = "verify:whatif_cmd"
_COMMANDS["compare"] = "verify:compare_cmd"
_COMMANDS["check"] = "verify:check_cmd"
_COMMANDS["chart"] = "pictures:chart_cmd"
_COMMANDS["report"] = "pictures:report_cmd"
_COMMANDS["demo"] = "demo:demo_cmd"


class _Group(click.Group):
    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(_COMMANDS)

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        target = _COMMANDS.get(name)
        if target is None:
            return None
        module, attr = target.split(":")
        return getattr(importlib.import_module(f"attrib.cli.{module}"), attr)


@click.group(
    cls=_Group,
    help=f"Where your web application's database time goes, route by route.\n\n{EXIT_CODES}",
)
@click.version_option(__version__, prog_name="attrib")
@click.option("--debug", is_flag=True, help="Show the full traceback of errors.")
@click.pass_context
def cli(ctx: click.Context, debug: bool) -> None:
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


def main(argv: list[str] | None = None) -> None:
    """Run the CLI; turn attrib's errors into one-line messages and exit codes."""
    debug = "--debug" in (argv if argv is not None else sys.argv[1:])
    try:
        cli.main(args=argv, prog_name="attrib", standalone_mode=False)
    except click.exceptions.Abort:
        click.echo("Aborted.", err=True)
        sys.exit(130)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except AttribError as exc:
        if debug:
            raise
        click.echo(f"Error: {exc}", err=True)
        sys.exit(exc.exit_code)
    except duckdb.Error as exc:  # the store failed under us (full disk, I/O error)
        if debug:
            raise
        reason = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        click.echo(f"Error: the store could not be read or written: {reason}", err=True)
        sys.exit(4)
    except OSError as exc:
        if debug:
            raise
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        click.echo(f"Error: {where}{exc.strerror or exc}", err=True)
        sys.exit(3)
    except KeyboardInterrupt:
        click.echo("Interrupted.", err=True)
        sys.exit(130)
