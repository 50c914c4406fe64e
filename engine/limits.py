"""Bounded input: the limits every limbclock file reader enforces, and the checks that enforce them.

A reader checks the size of the text, the depth of its nesting, the type and the range of every
number it uses, BEFORE any arithmetic, so that no input can make the engine overflow, recurse without
end, or run without bound.  ``docs/formats.md`` states the same limits for the user
(``tests/test_limits.py`` checks that the two agree).

- ``MAX_FILE_BYTES``: 4 MiB per file.  A session of ``MAX_CONTACTS`` contacts as the archive writes
  it (indented JSON with ``seq``, ``time_quality``, ``sigma_s`` and ``void`` on every contact) takes
  about 190 bytes a contact, 1.9 MB in all: 4 MiB leaves twice that for notes and other extra keys.
- ``MAX_DEPTH``: 32 levels of nesting (a session uses 3; the rest is room for extra keys).
- ``MAX_CONTACTS``: 10 000 contacts per session (a navigator times tens a day; this is a season of
  an automated timer merged into one file).  ``MAX_IMAGES``: 512 images per instrument (the largest
  ladder ``engine.instrument.ladder`` builds, 7 plates to order 4, has 505).
- ``MAX_ID_CHARS``: 32 characters for an image id; ``MAX_TIME_CHARS``: 40 for an ISO 8601 time.
- Every number anywhere in a file (extra keys included) is finite and its magnitude at most
  ``MAX_ABS_INT`` (1e18) when it is an integer; each number a reader uses lies within ``RANGES``.
- ``DUPLICATE_US``: two contacts of the same body, limb and image within 0.5 s are one contact
  timed twice (a bounced button, a record synced twice): the later one is kept but not used.

Pure Python, MicroPython-safe (no ``math.isfinite``: NaN is the one value unequal to itself and an
infinity minus itself is not 0).
"""
import json

MAX_FILE_BYTES = 4 * 1024 * 1024
MAX_DEPTH = 32
MAX_CONTACTS = 10000
MAX_IMAGES = 512
MAX_ID_CHARS = 32
MAX_TIME_CHARS = 40
MAX_ABS_INT = 10 ** 18
DUPLICATE_US = 500000

# field name -> (lowest, highest) accepted, in the unit its name carries.  Where a bound is a choice
# rather than physics, the choice is the generous side of what a small vessel meets.
RANGES = {
    "eye_height_m": (0.0, 100.0),            # sea level to the bridge of a large ship
    "temperature_c": (-60.0, 60.0),          # air at sea, with margin on both records
    "pressure_hpa": (800.0, 1100.0),         # sea level: 870 hPa (lowest recorded) to 1084 (highest)
    "lat_deg": (-89.0, 89.0),                # the local plane of the fix fails at the poles
    "lon_deg": (-180.0, 360.0),              # east positive; 180..360 is read as west
    "course_deg": (0.0, 360.0),
    "speed_kn": (0.0, 60.0),
    "velocity_sigma_kn": (0.0, 10.0),
    "deviation_deg": (0.5, 89.0),            # session images; an instrument file allows 0..90
    "instrument_deviation_deg": (0.0, 90.0),
    "sigma_arcmin": (0.0, 600.0),            # an image's deviation sigma (> 0 in a session)
    "sigma_s": (0.0, 60.0),                  # a contact's stamp uncertainty
    "yaw_sigma_deg": (0.0, 10.0),
    "contact_sigma_arcmin": (0.0, 30.0),
    "reaction_delay_s": (-2.0, 2.0),
    "reaction_delay_sigma_s": (0.0, 10.0),
    "dut1_s": (-0.9, 0.9),                   # ITU-R TF.460-6: |UT1 - UTC| <= 0.9 s
    "dr_sigma_nm": (0.1, 3000.0),            # the DR's uncertainty for identification
    "plate_angle_deg": (0.0, 30.0),          # each plate angle, both ends excluded
    "coef": (0, 16),                         # a multiple of a plate angle (order 4 reaches 4)
}
MAX_PLATES = 6                               # plate angles (7 plates)


def show(x):
    """A value as a short text for an error message (one line, at most 40 characters)."""
    if isinstance(x, int) and not isinstance(x, bool) and not -MAX_ABS_INT <= x <= MAX_ABS_INT:
        return "an integer beyond 1e18" if x > 0 else "an integer beyond -1e18"
    if isinstance(x, float):
        s = repr(x)
    else:
        try:
            s = json.dumps(x)
        except (TypeError, ValueError):
            s = repr(x)
    return s if len(s) <= 40 else s[:37] + "..."


def is_number(x):
    """An int or a float, not a bool (JSON true is not 1)."""
    return (isinstance(x, int) or isinstance(x, float)) and not isinstance(x, bool)


def number(x, path, lo, hi, error):
    """``x`` as a float, after checking that it is a finite number within lo..hi (both included).

    The range is checked before ``float()``: an int of any size compares exactly with the
    bounds, so 10**400 is refused by its range instead of overflowing.  Raises ``error``
    (an exception class) with a message that starts with ``path``."""
    if not is_number(x):
        raise error("%s: must be a number, got %s" % (path, show(x)))
    if isinstance(x, float) and (x != x or x - x != 0.0):
        raise error("%s: must be a finite number, got %s" % (path, show(x)))
    if not lo <= x <= hi:
        small = isinstance(x, float) or -MAX_ABS_INT <= x <= MAX_ABS_INT
        raise error("%s: %s outside %r..%r" % (path, show(float(x)) if small else show(x), lo, hi))
    return float(x)


def field(obj, key, path, error, default=None, required=True, name=None):
    """The number ``obj[key]`` checked against ``RANGES[name or key]``; ``default`` when absent
    and not ``required``.  ``path`` is the path of ``obj``."""
    lo, hi = RANGES[name or key]
    where = "%s.%s" % (path, key) if path else key
    if key not in obj:
        if required:
            raise error("%s: missing (a number within %r..%r is required)" % (where, lo, hi))
        return default
    return number(obj[key], where, lo, hi, error)


def text(x, path, error, max_chars, what="text"):
    """A non-empty str of at most ``max_chars`` printable characters (no control characters, no
    lone surrogates: an id is printed in tables and written to terminals)."""
    if not isinstance(x, str) or not x:
        raise error("%s: must be a non-empty %s, got %s" % (path, what, show(x)))
    if len(x) > max_chars:
        raise error("%s: %d characters; at most %d" % (path, len(x), max_chars))
    for ch in x:
        o = ord(ch)
        if o < 32 or 127 <= o < 160 or 0xD800 <= o <= 0xDFFF:
            raise error("%s: %s holds a control character or a lone surrogate" % (path, show(x)))
    return x


def load_json(data, what, error, max_bytes=MAX_FILE_BYTES):
    """Decode a file's JSON (bytes or str) within the size limit.

    Refuses more than ``max_bytes`` (bytes, or characters for a str), text that is not UTF-8,
    and text that is not JSON, nested too deep for the decoder included (CPython raises
    RecursionError, MicroPython RuntimeError; both are RuntimeError).  The decoded value is
    not yet checked: ``check_tree`` does that."""
    if isinstance(data, (bytes, bytearray)):
        if len(data) > max_bytes:
            raise error("%s: %d bytes; at most %d bytes (%s) per file" % (what, len(data), max_bytes, _mib(max_bytes)))
        try:
            data = bytes(data).decode("utf-8")
        except UnicodeError:
            raise error("%s: not UTF-8 text" % what)
    if not isinstance(data, str):
        raise error("%s: expected JSON text, got %s" % (what, type(data).__name__))
    if len(data) > max_bytes:
        raise error("%s: %d characters; at most %d bytes (%s) per file" % (what, len(data), max_bytes, _mib(max_bytes)))
    try:
        return json.loads(data)
    except RuntimeError:
        raise error("%s: nested deeper than %d levels" % (what, MAX_DEPTH))
    except ValueError as e:
        raise error("%s: not valid JSON (%s)" % (what, _one_line(str(e))))


def _mib(n):
    return "%d MiB" % (n // 1048576) if n % 1048576 == 0 else "%.1f MiB" % (n / 1048576.0)


def _one_line(s):
    s = s.replace("\n", " ").replace("\r", " ")
    return s if len(s) <= 120 else s[:117] + "..."


def check_tree(value, error, max_depth=MAX_DEPTH):
    """Walk a decoded file: at most ``max_depth`` levels of nesting, every float finite, every
    int within +-``MAX_ABS_INT``, every key a str.  Raises ``error`` naming the path.  The walk
    recurses at most ``max_depth`` + 1 levels deep, so it is safe on any input."""
    path = []
    _walk(value, 1, path, error, max_depth)


def _walk(v, depth, path, error, max_depth):
    if isinstance(v, dict):
        if depth > max_depth:
            raise error("%s: nested deeper than %d levels" % (_path(path), max_depth))
        for k in v:
            if not isinstance(k, str):
                raise error("%s: key %s is not a text" % (_path(path), show(k)))
            path.append(k)
            _walk(v[k], depth + 1, path, error, max_depth)
            path.pop()
    elif isinstance(v, list):
        if depth > max_depth:
            raise error("%s: nested deeper than %d levels" % (_path(path), max_depth))
        for i in range(len(v)):
            path.append(i)
            _walk(v[i], depth + 1, path, error, max_depth)
            path.pop()
    elif isinstance(v, float):
        if v != v or v - v != 0.0:
            raise error("%s: must be a finite number, got %s" % (_path(path), show(v)))
    elif isinstance(v, int) and not isinstance(v, bool):
        if not -MAX_ABS_INT <= v <= MAX_ABS_INT:
            raise error("%s: %s (the limit for any integer in a limbclock file)" % (_path(path), show(v)))
    elif v is not None and not isinstance(v, (str, bool)):
        raise error("%s: %s is not a JSON value" % (_path(path), type(v).__name__))


def _key(k):
    """A key as shown in a path: as it is when short printable ASCII, else quoted and escaped."""
    if len(k) > 24:
        k = k[:21] + "..."
    for ch in k:
        if not " " < ch < "\x7f" or ch in ".[]\"":
            return json.dumps(k)
    return k


def _path(parts, keep=6):
    """``contacts[3].note`` from ['contacts', 3, 'note']; long paths keep their first ``keep`` parts."""
    out = ""
    for n, p in enumerate(parts):
        if n == keep:
            return out + "..."
        if isinstance(p, int):
            out += "[%d]" % p
        else:
            out += ("." if out else "") + _key(p)
    return out or "(top level)"
