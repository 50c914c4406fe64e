"""Input files of the command line, read within the size limit of every limbclock file.

``read_file`` reads at most ``engine.limits.MAX_FILE_BYTES`` + 1 bytes, so that a file above the
limit is refused (naming the limit) without ever being held in memory whole; the engine's reader
then applies the other limits (nesting, counts, ranges).  ``option`` checks a numeric option
against the same ranges the files obey (argparse's ``float`` takes "nan", "inf" and "1e400").
"""
import sys

from engine import limits
from host.errors import UserError


def read_file(path, what="file"):
    """The bytes of ``path`` (``-``: standard input); UserError above MAX_FILE_BYTES.  OSError
    (no such file, no permission...) goes up as it is: the command line reports it in one line."""
    cap = limits.MAX_FILE_BYTES
    if path == "-":
        data = sys.stdin.buffer.read(cap + 1)
    else:
        with open(path, "rb") as f:
            data = f.read(cap + 1)
    if len(data) > cap:
        raise UserError("%s %s: over %d bytes; at most %d bytes (%.0f MiB) per file" % (what, path, cap, cap, cap / 1048576.0))
    return data


def option(value, name, field=None, lo=None, hi=None):
    """A numeric option as a float, finite and within ``limits.RANGES[field]`` (or lo..hi)."""
    if field is not None:
        lo, hi = limits.RANGES[field]
    return limits.number(value, name, lo, hi, UserError)
