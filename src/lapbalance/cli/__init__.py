"""Command-line interface: click commands only (parse, call, print, write).

Each command lives in its own module in this package and registers itself on ``main``.
Bad input surfaces as :class:`lapbalance.errors.InputError`: one line on stderr, exit
status 2, no traceback (``--debug`` shows it).
"""

from __future__ import annotations

import sys
import warnings

import click

from lapbalance.errors import InputError, PhysicsWarning, tidy
from lapbalance.version import __version__


class _Group(click.Group):
    """A click group that turns InputError into one line and exit status 2."""

    def invoke(self, ctx):
        debug = ctx.params.get("debug", False)
        try:
            return super().invoke(ctx)
        except InputError as e:
            if debug:
                raise
            click.echo(f"lapbalance: {e.one_line()}", err=True)
            sys.exit(2)
        except KeyboardInterrupt:
            click.echo("lapbalance: interrupted; no partial output was written", err=True)
            sys.exit(130)
        except click.UsageError as e:  # a mistyped option or argument: one line too
            if debug:
                raise
            sub = e.ctx.info_name if e.ctx is not None and e.ctx.parent is not None else None
            where = f"{sub}: " if sub else ""
            hint = f"lapbalance {sub} --help" if sub else "lapbalance --help"
            msg = tidy(f"lapbalance: {where}{e.format_message().rstrip('.')}; see {hint}")
            click.echo(msg, err=True)
            sys.exit(2)
        except BrokenPipeError:  # output piped into a program that stopped reading
            import os

            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            sys.exit(1)
        except OSError as e:  # a path fault no reader or writer turned into words
            if debug:
                raise
            from lapbalance.outputs import os_error_line

            click.echo(f"lapbalance: {os_error_line(e, 'use the path')}", err=True)
            sys.exit(2)
        except MemoryError:
            if debug:
                raise
            click.echo("lapbalance: out of memory; use a coarser --step-m, fewer sweep "
                       "points or a smaller input", err=True)
            sys.exit(2)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    prefix = "warning" if issubclass(category, PhysicsWarning) else category.__name__
    click.echo(tidy(f"lapbalance: {prefix}: {message}"), err=True)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="lapbalance")
@click.option("--debug", is_flag=True, help="Show Python tracebacks for errors.")
def main(debug: bool) -> None:
    """lapbalance: quasi-static lap balance simulator.

    Runs a car over a track and keeps the aerodynamic load split apart from the load
    transfer caused by forces at the ground; flags corners where lifting off moves the
    balance toward oversteer. Results are quasi-static estimates: confirm them with
    qualified engineers and track testing, within the rules and the law.
    """
    warnings.showwarning = _show_warning
    _terminate_cleanly()


def _terminate_cleanly() -> None:
    """Turn SIGTERM (a job scheduler or ``kill``) into the interrupt path, so staging folders
    and locks are removed as on Ctrl-C (``kill -9`` cannot be caught: the next run clears
    what it leaves)."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return
    try:
        if signal.getsignal(signal.SIGTERM) is signal.SIG_DFL:
            def _raise(signum, frame):
                raise KeyboardInterrupt

            signal.signal(signal.SIGTERM, _raise)
    except (ValueError, OSError, AttributeError):  # pragma: no cover - no SIGTERM here
        pass


# Command modules register themselves on ``main`` when imported.
from lapbalance.cli import car_cmd  # noqa: E402,F401

for _mod in ("track_cmd", "lap_cmd", "demo_cmd", "tunnel_cmd", "compare_cmd", "check_cmd",
             "report_cmd", "liftrun_cmd", "rerun_cmd", "correlate_cmd"):
    try:
        __import__(f"lapbalance.cli.{_mod}")
    except ModuleNotFoundError as _e:  # a command module not written yet
        if _e.name != f"lapbalance.cli.{_mod}":
            raise
