"""The ``limbclock`` command line.

Each command lives in its own module ``host/cmd_*.py`` with a ``register(sub)``
function that adds its parser and sets ``func`` (called with the parsed
arguments, returns an exit code).  ``COMMANDS`` lists them in help order.
Errors of the engine (``ValueError`` subclasses), file and serial errors and
``UserError`` print one line and exit 2; ``--debug`` shows the traceback.
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
        from host.errors import UserError
        known = (UserError, ValueError, OSError, KeyError)
        try:
            import serial
            known = known + (serial.SerialException,)
        except ImportError:
            pass
        if isinstance(exc, known):
            print("limbclock %s: error: %s" % (args.command, exc), file=sys.stderr)
            return 2
        raise
