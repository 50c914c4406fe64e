"""The ``limbclock`` command line.

Each command lives in its own module ``host/cmd_*.py`` with a ``register(sub)``
function that adds its parser and sets ``func`` (called with the parsed
arguments, returns an exit code).  ``COMMANDS`` lists them in help order.

Exit codes.  0: done.  2: a refusal - the input or the environment is at fault, and
ONE line on stderr says which field or file and why (``is_refusal``: the project's own
exception types, ``OSError`` for files and serial ports, SQLite's "cannot use the
database" errors).  70 (``EX_SOFTWARE`` of sysexits.h): anything else is a bug in
limbclock - a ``ZeroDivisionError``, a ``math domain error``, an ``OverflowError``, a
``RecursionError``... - reported as one line naming the exception and where it was
raised.  ``--debug`` lets every exception through with its traceback.  130: interrupted.
"""
import argparse
import importlib
import sys

COMMANDS = (
    "host.cmd_demo",
    "host.cmd_almanac",
    "host.cmd_plan",
    "host.cmd_fix",
    "host.cmd_identify",
    "host.cmd_calibrate",
    "host.cmd_ladder",
    "host.cmd_sync",
    "host.cmd_archive",
    "host.cmd_sim",
    "host.cmd_board",
    "host.cmd_doctor",
)


def build_parser():
    parser = argparse.ArgumentParser(
        prog="limbclock",
        description="Timed-contact sights with a fixed-deviation multi-image instrument: "
                    "almanac, contact schedule, fix, calibration, timer sync.")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        importlib.import_module(name).register(sub)
    return parser


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 1
    try:
        return args.func(args) or 0
    except KeyboardInterrupt:
        print("limbclock: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader went away (e.g. `limbclock export --json | head`): stop quietly
        import os
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except Exception as exc:  # one clear line at the edge; the traceback with --debug
        if args.debug:
            raise
        if is_refusal(exc):
            print("limbclock %s: error: %s" % (args.command, one_line(exc)), file=sys.stderr)
            return EX_INPUT
        print("limbclock %s: internal error (a bug in limbclock, not a problem with the input): %s; "
              "run again with --debug for the traceback and report it" % (args.command, crash_line(exc)),
              file=sys.stderr)
        return EX_SOFTWARE


EX_INPUT = 2
EX_SOFTWARE = 70
PROJECT_PACKAGES = ("engine", "device", "host")


def is_refusal(exc):
    """True when ``exc`` refuses the input or the environment, not a bug: an exception class
    of limbclock's own (defined in ``engine``, ``device`` or ``host``, or derived from one),
    an ``OSError`` (files, serial ports: ``serial.SerialException`` is one), or SQLite saying
    the archive file cannot be used (``OperationalError``: locked, read-only, disk full;
    a bare ``DatabaseError``: not a database, damaged).  Builtin errors raised by
    arithmetic or by the interpreter (ValueError "math domain error", ZeroDivisionError,
    OverflowError, RecursionError, KeyError, IndexError, TypeError...) are bugs: the reader
    must have refused their cause earlier, with the field named."""
    if isinstance(exc, OSError):
        return True
    for cls in type(exc).__mro__:
        module = getattr(cls, "__module__", None) or ""
        if module.split(".")[0] in PROJECT_PACKAGES:
            return True
    import sqlite3
    return isinstance(exc, sqlite3.OperationalError) or type(exc) is sqlite3.DatabaseError


def one_line(exc):
    """The message of an exception on one line (a newline inside a value is shown escaped)."""
    text = str(exc) or type(exc).__name__
    return text.replace("\r", "\\r").replace("\n", "\\n")


def crash_line(exc):
    """``TypeError: message (engine/fix.py:123)`` - the exception and the line that raised it."""
    import os
    import traceback
    where = ""
    frames = traceback.extract_tb(exc.__traceback__)
    if frames:
        root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
        name = frames[-1].filename
        if name.startswith(root + os.sep):
            name = name[len(root) + 1:]
        where = " (%s:%d)" % (name, frames[-1].lineno)
    msg = one_line(exc)
    if len(msg) > 200:
        msg = msg[:197] + "..."
    return "%s: %s%s" % (type(exc).__name__, msg, where)
