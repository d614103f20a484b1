"""The ``nodecast`` command line: the group of commands and the one place errors become lines.

Parsing and printing only: the work happens in the library (``nodecast.compiler``,
``nodecast.trainer``), which never imports this package.

Exit status: 0 success, 1 a verification or score gate failed, 2 bad usage or bad input (one line on
stderr, no traceback). Heavy libraries (scikit-learn, onnx, onnxruntime) load inside the commands.
"""

from __future__ import annotations

import re
import signal
import sys
import threading
import warnings

import click

from nodecast.cli.compare import compare
from nodecast.cli.demo import demo
from nodecast.cli.diff import diff
from nodecast.cli.emit import emit
from nodecast.cli.inspect import inspect
from nodecast.cli.predict import predict
from nodecast.cli.score import score
from nodecast.cli.select import select
from nodecast.cli.shrink import shrink
from nodecast.cli.train import train
from nodecast.cli.verify import verify
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.version import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="nodecast")
def cli():
    """Train random-node networks and compile them into verified ONNX, C99 and Python artifacts.

    A fitted model is not a safety function: verify it on its declared input domain, guard inputs
    outside it, and follow the functional-safety standards, codes and licensed practice that apply.
    """


for command in (train, predict, inspect, emit, verify, demo, diff, score, select, compare, shrink):
    cli.add_command(command)


def _stop_on_sigterm(signum, frame) -> None:
    # unwind like Ctrl-C, so that compiler/files.py removes any half-written temporary output
    raise SystemExit(128 + signum)


def usage_error_line(exc) -> str:
    """A usage error from the argument parser as one line: what is wrong and where to look."""
    command = exc.ctx.command_path if exc.ctx is not None else "nodecast"
    message = " ".join(exc.format_message().split())
    return f"nodecast: error: {message} (see '{command} --help')"


def main(argv=None) -> None:
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _stop_on_sigterm)
    from nodecast.cli.terminal import EscapingStream

    streams = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = EscapingStream(sys.stdout), EscapingStream(sys.stderr)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            code = _run(argv)
        _show_warnings(caught, failed=bool(code))
    finally:
        sys.stdout, sys.stderr = streams
    if code is not None:  # a command that returns normally returns here too
        sys.exit(code)


def _run(argv) -> int | None:
    """The command's exit status (None: it returned normally); every error is one line."""
    try:
        cli.main(args=argv, prog_name="nodecast", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except click.exceptions.NoArgsIsHelpError as exc:  # bare `nodecast`: the help, as asked
        click.echo(exc.ctx.get_help(), err=True)
        return 2
    except click.UsageError as exc:  # one line, like every other error (docs/reliability.md)
        click.echo(usage_error_line(exc), err=True)
        return 2
    except click.ClickException as exc:
        click.echo(f"nodecast: error: {' '.join(exc.format_message().split())}", err=True)
        return 2
    except (click.exceptions.Abort, KeyboardInterrupt):  # click turns Ctrl-C into Abort
        click.echo("nodecast: interrupted", err=True)
        return 130
    except NodecastError as exc:
        click.echo(f"nodecast: error: {_plain_numbers(' '.join(str(exc).split()))}", err=True)
        return 2
    except MemoryError:
        click.echo("nodecast: error: out of memory; the input or the model is too large for this "
                   "machine", err=True)
        return 2
    return None


_NUMPY_REPR = re.compile(r"\bnp\.(?:float|int|uint|bool|complex)\w*\(([^()]*)\)")
_QUOTED = re.compile(r"((?<!\w)'(?:[^'\\]|\\.)*'(?!\w)|(?<!\w)\"(?:[^\"\\]|\\.)*\"(?!\w))")


def _plain_numbers(message: str) -> str:
    """A message with NumPy scalar reprs (``np.float64(0.5)``, NumPy 2) shown as plain numbers,
    outside quotes only: quoted text is the user's (a cell, a name) and is shown as it is."""
    parts = _QUOTED.split(message)  # odd indices are the quoted parts
    return "".join(part if i % 2 else _NUMPY_REPR.sub(r"\1", part) for i, part in enumerate(parts))


def _show_warnings(caught, failed: bool) -> None:
    """Library warnings as one line each, after the command; none after an error (the error line
    says what matters). NumPy's floating-point RuntimeWarnings are dropped: results that overflow
    are checked and refused by the code that uses them."""
    if failed:
        return
    shown = set()
    for warning in caught:
        text = " ".join(str(warning.message).split())
        if issubclass(warning.category, RuntimeWarning) and "encountered in" in text:
            continue
        if text not in shown:
            shown.add(text)
            click.echo(f"nodecast: warning: {text}", err=True)
