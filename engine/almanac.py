"""Compact almanac of the Sun and Moon: Chebyshev series in small binary files.

``load()`` gives an ``Almanac`` over the shipped files ``engine/data/YYYY.lca``
(one file per UTC year, both bodies); it reads one year at a time, when first
needed, and verifies its CRC-32.  ``Almanac.position(body, t_us)`` returns a
``Position``: GHA, declination, semi-diameter, horizontal parallax and the
rates of GHA and declination.  Pure Python, standard library only, and safe
under MicroPython on a board with single-precision floats.

What is stored.  For each body, consecutive segments of fixed length in TT,
each holding Chebyshev series (Rivlin, *The Chebyshev Polynomials*, 1974;
Press et al., *Numerical Recipes* 3rd ed. 2007, 5.8) of

* q0: right ascension measured from the CIO (deg), unwrapped in the segment;
* q1: declination (deg);
* q2: Sun: semi-diameter (arcmin); Moon: horizontal parallax (arcmin).

The other of SD/HP is derived: Sun HP = SD x 8.794148"/959.63" (both scale
as 1/distance; sin HP = a_e/distance at 1 au); Moon sin SD = k sin HP with
k = 0.2725076 (IAU 1982; ``engine.constants.MOON_K``).  GHA = ERA(UT1) - RA
(``timescale.era_deg``).  The series were fitted by ``host/almanac_fit.py``
to the reference pipeline ``vectors/reference.py`` (DE421 + IAU 2006/2000A
with ERFA: apparent places, light time, deflection, aberration).

File format ``.lca`` version 1 (little-endian; all offsets in bytes)::

    0   4s  magic b"LCAL"
    4   B   version (1)
    5   B   number of bodies
    6   H   year (the UTC year the file serves)
    8   i   start: TT day number since 1970-01-01 at which every body's first
            segment begins (00:00 TT)
    12  ... per body, a block:
            B body (0 Sun, 1 Moon), B segment length in days, H segments,
            I offset of the body's bit data, then 3 quantities, each:
            B degree N, b quantum exponent e (quantum = 2**e in the
            quantity's unit), N+1 x B bit widths w_0..w_N
    ...     bit data of each body: segment after segment, in each segment the
            three quantities' coefficients c_0..c_N, each a two's-complement
            integer of w_k bits (w_k = 0: the coefficient is zero), packed
            most significant bit first.  Value = integer x 2**e.  q0's c_0 is
            reduced to [-180, 180) deg.
    end-4  I  CRC-32 (binascii.crc32) of every byte before it

Every segment of a body has the same number of bits, so segment i starts at
bit i x (sum of all widths) of the body's data: evaluation decodes one segment
only.

Evaluation.  Decoding a segment turns its integer Chebyshev coefficients into
integer coefficients of the power basis in x (exact, ``_power_form``), then
floats; ``_horner`` sums them with their derivative.  On a board (MicroPython:
the packed form) the file's bytes stay the only store and the last decoded
segment of each body is kept; on a host (CPython: the decoded form) every
segment is kept once decoded, so an instant anywhere decodes nothing once its
segment has been used (``load(decoded=...)``; both forms give identical numbers).

Single precision.  Time enters as an integer offset within the segment, so
x in [-1, 1] keeps its precision; the coefficients are integers, rounded once
each to a float; ERA is built from integers by ``timescale.era_deg``.  The arithmetic goes through the
module-level names ``math`` and ``_float`` so a test can run it rounded to
single precision (``tests/test_almanac_float32.py``).
"""
import math
import struct
import binascii

from engine import timescale
from engine.constants import US_PER_DAY, US_PER_S, MOON_K, AU_KM, SUN_SD_1AU_ARCSEC

MAGIC = b"LCAL"
VERSION = 1
BODIES = ("sun", "moon")
QUANTITIES = ("ra_cio_deg", "dec_deg", "sd_or_hp_arcmin")
A_E_KM = 6378.137                      # Earth equatorial radius (WGS 84)
# Sun: HP / SD, both proportional to 1/distance; HP at 1 au = asin(a_e / au) = 8.794148"
SUN_HP_PER_SD = math.asin(A_E_KM / AU_KM) * (180.0 / math.pi) * 3600.0 / SUN_SD_1AU_ARCSEC
ERA_RATE_DEG_PER_S = 360.0 * 1.00273781191135448 / 86400.0   # IERS Conventions 2010 eq. 5.15
_HEADER = "<4sBBHi"
_HEADER_SIZE = 12
_BODY = "<BBHI"
_BODY_SIZE = 8

_float = float          # swapped by the single-precision test (numpy.float32)


class AlmanacError(ValueError):
    """An instant outside the almanac, an unknown body, or a corrupt almanac file."""


class Position(object):
    """Apparent geocentric place of a body at an instant (see ``Almanac.position``)."""
    __slots__ = ("body", "t_us", "gha_deg", "dec_deg", "sd_arcmin", "hp_arcmin",
                 "gha_rate_deg_per_s", "dec_rate_deg_per_s")

    def __init__(self, body, t_us, gha_deg, dec_deg, sd_arcmin, hp_arcmin, gha_rate_deg_per_s,
                 dec_rate_deg_per_s):
        self.body = body
        self.t_us = t_us
        self.gha_deg = gha_deg
        self.dec_deg = dec_deg
        self.sd_arcmin = sd_arcmin
        self.hp_arcmin = hp_arcmin
        self.gha_rate_deg_per_s = gha_rate_deg_per_s
        self.dec_rate_deg_per_s = dec_rate_deg_per_s

    def __repr__(self):
        return "Position(%s, %s, gha_deg=%.5f, dec_deg=%.5f, sd_arcmin=%.3f, hp_arcmin=%.3f)" % (
            self.body, timescale.format_utc(self.t_us), self.gha_deg, self.dec_deg, self.sd_arcmin,
            self.hp_arcmin)


def _signed_bits(buf, pos, w):
    """The two's-complement integer of ``w`` (>= 1) bits at bit ``pos`` of ``buf`` (MSB first).
    Intermediate values stay below 2**24 (small ints on a board).  Reads up to two
    bytes past the field: the file's 4-byte CRC always follows the bit data."""
    i = pos >> 3
    s = pos & 7
    if s + w <= 24:
        v = ((buf[i] << 16 | buf[i + 1] << 8 | buf[i + 2]) >> (24 - s - w)) & ((1 << w) - 1)
    else:
        v = 0
        n = w
        while n > 0:
            take = 8 - s
            if take > n:
                take = n
            v = (v << take) | ((buf[i] >> (8 - s - take)) & ((1 << take) - 1))
            n -= take
            i += 1
            s = 0
    if v >= 1 << (w - 1):
        v -= 1 << w
    return v


_T_ROWS = []        # row k: the integer coefficients of T_k(x) for x^(k&1), x^(k&1 + 2), ..., x^k


def _t_rows(n):
    """The rows of ``_T_ROWS`` up to T_(n-1), built once (T_0 = 1, T_1 = x,
    T_{k+1} = 2x T_k - T_{k-1}; Rivlin, *The Chebyshev Polynomials*, 1974, ch. 1).
    Only the powers of the parity of k are nonzero; the integers are exact
    (|coefficient| < 2**20 for k <= 16)."""
    rows = _T_ROWS
    while len(rows) < n:
        k = len(rows)
        if k < 2:
            rows.append((1,))
            continue
        hi = rows[k - 1]                 # T_{k-1}: powers of the other parity
        lo = rows[k - 2]                 # T_{k-2}: powers of parity k, one term fewer
        row = []
        for i in range(len(lo) + 1):     # the coefficient of x^((k&1) + 2i)
            v = 0
            # 2x T_{k-1}: x^p of T_{k-1} becomes x^(p+1); p = (k&1) + 2i - 1
            p = (k & 1) + 2 * i - 1
            if p >= 0:
                v = 2 * hi[(p - ((k - 1) & 1)) // 2]
            if i < len(lo):
                v -= lo[i]
            row.append(v)
        rows.append(tuple(row))
    return rows


def _power_form(n):
    """Integer Chebyshev coefficients ``[n_0, ..., n_N]`` -> the integer coefficients
    of the same polynomial in the power basis, highest power first ``[A_N, ..., A_0]``:
    sum n_k T_k(x) = sum A_j x^j.  Exact: integers throughout (``_t_rows``).

    The stored coefficients are integers times the quantity's quantum, so the
    power form costs no precision at all; a coefficient is rounded once, when it
    becomes a float.  Horner's rule in the power basis is as accurate as
    Clenshaw's recurrence in the Chebyshev basis (C. W. Clenshaw, "A note on the
    summation of Chebyshev series", MTAC 9, 1955) here because the series are smooth on
    their segment and their coefficients fall fast: sum |A_j| stays within
    2 sum |n_k| (every shipped segment is checked in ``tests/test_almanac.py``)."""
    m = len(n)
    rows = _t_rows(m)
    a = [0] * m
    for k in range(m):
        nk = n[k]
        if nk:
            j = k & 1
            for tk in rows[k]:
                a[j] += nk * tk
                j += 2
    a.reverse()
    return a


def _horner(a, x, with_rate):
    """(p, dp/dx) of the polynomial ``a = [a_N, ..., a_0]`` at ``x`` (dp/dx is 0 unless
    ``with_rate``): Horner's rule, and the same rule on the running value for the
    derivative (Knuth, *TAOCP* vol. 2, 4.6.4).  One ``for`` over the list, one
    multiply-add per power: the fastest form in CPython and MicroPython alike."""
    v = d = _float(0.0)
    if with_rate:
        for ak in a:
            d = d * x + v
            v = v * x + ak
        return v, d
    for ak in a:
        v = v * x + ak
    return v, d


class _Quantity(object):
    __slots__ = ("degree", "quantum", "widths", "bits")

    def __init__(self, degree, qexp, widths):
        self.degree = degree
        self.quantum = _float(2.0 ** qexp)
        self.widths = widths
        self.bits = sum(widths)


class _BodySeries(object):
    __slots__ = ("body", "seg_us", "nseg", "bit0", "quantities", "seg_bits", "cached_index", "cached",
                 "decoded", "dxdt")

    def __init__(self, body, seg_days, nseg, data_offset, quantities):
        self.body = body
        self.seg_us = seg_days * US_PER_DAY
        self.nseg = nseg
        self.bit0 = data_offset * 8
        self.quantities = quantities
        self.seg_bits = 0
        for q in quantities:
            self.seg_bits += q.bits
        self.cached_index = -1      # packed form: the last decoded segment only
        self.cached = None
        self.decoded = None         # decoded form (host): a list of every segment, filled on first use
        self.dxdt = _float(2 * US_PER_S) / _float(self.seg_us)      # dx per second of the segment


class AlmanacYear(object):
    """One parsed ``.lca`` file: the series of both bodies for one UTC year.

    Packed form (``decoded=False``, the board's): the file's bytes are the only
    store; a body's last decoded segment is kept, so evaluations inside one
    segment decode nothing.  Decoded form (``decoded=True``, the host's): every
    segment is decoded on its first use and kept (a list of floats per segment,
    about 80 KB per year in CPython, 2.1 MB for 2025-2050), so evaluations at random instants decode
    nothing once the year is warm.  Both forms run the same arithmetic on the
    same numbers and give identical results."""
    __slots__ = ("year", "start_tt_us", "buf", "series", "size", "is_decoded")

    def __init__(self, year, start_tt_us, buf, series, decoded=False):
        self.year = year
        self.start_tt_us = start_tt_us
        self.buf = buf
        self.series = series
        self.size = len(buf)
        self.is_decoded = False
        if decoded:
            self.decode()

    def decode(self):
        """Switch to the decoded form: keep every segment once it has been decoded."""
        for s in self.series:
            if s.decoded is None:
                s.decoded = [None] * s.nseg
        self.is_decoded = True

    def end_tt_us(self, body):
        s = self._series(body)
        return self.start_tt_us + s.nseg * s.seg_us

    def _series(self, body):
        for s in self.series:
            if s.body == body:
                return s
        raise AlmanacError("body %r is not in the almanac file for %d" % (body, self.year))

    def chebyshev(self, body, index):
        """The three Chebyshev coefficient lists ``[c_0, ..., c_N]`` of segment ``index`` of
        ``body``, as stored, in the quantities' units."""
        s = self._series(body)
        if not 0 <= index < s.nseg:
            raise AlmanacError("segment %r outside the %s series for %d" % (index, body, self.year))
        return self._chebyshev(s, index)

    def _chebyshev(self, s, index, scaled=True):
        # the stored integers of segment index, scaled by the quantum (exact: a power of two)
        buf = self.buf
        pos = s.bit0 + index * s.seg_bits
        read = _signed_bits
        out = []
        for q in s.quantities:
            c = []
            for w in q.widths:
                if w:
                    c.append(read(buf, pos, w))
                    pos += w
                else:
                    c.append(0)
            if scaled:
                quantum = q.quantum
                for i in range(len(c)):
                    c[i] = c[i] * quantum
            out.append(c)
        return out

    def _decode(self, s, index):
        """Segment ``index`` of series ``s`` as ``_horner`` takes it: the three quantities in
        the power basis, highest power first, in the quantities' units (``_power_form`` of
        the stored integers, each rounded once to a float and scaled by the quantum)."""
        out = self._chebyshev(s, index, False)
        for i in range(3):
            a = _power_form(out[i])
            quantum = s.quantities[i].quantum
            for j in range(len(a)):
                a[j] = _float(a[j]) * quantum
            out[i] = a
        return out

    def _coefficients(self, s, index):
        """Segment ``index`` of series ``s`` decoded (``_decode``), from the cache when kept."""
        d = s.decoded
        if d is not None:
            c = d[index]
            if c is None:
                c = d[index] = self._decode(s, index)
            return c
        if s.cached_index != index:
            s.cached = None         # drop the old segment before building the new one (heap)
            s.cached = self._decode(s, index)
            s.cached_index = index
        return s.cached

    def evaluate(self, body, tt_us):
        """([ra_cio_deg, dec_deg, sd_or_hp_arcmin], [rates per second of the first two]) at TT ``tt_us``."""
        ra, dec, third, ra_rate, dec_rate = self._eval(body, tt_us)
        return [ra, dec, third], [ra_rate, dec_rate]

    def _eval(self, body, tt_us):
        # (ra, dec, third, ra_rate, dec_rate) at TT tt_us, rates per second
        s = self._series(body)
        off = tt_us - self.start_tt_us
        seg_us = s.seg_us
        index = off // seg_us
        if index < 0 or index >= s.nseg:
            raise AlmanacError("instant (TT %s) outside the %s series of the almanac file for %d"
                               % (timescale.format_utc(tt_us), body, self.year))
        c_ra, c_dec, c_third = self._coefficients(s, index)
        x = _float(2 * (off - index * seg_us) - seg_us) / _float(seg_us)
        ra, ra_rate = _horner(c_ra, x, True)
        dec, dec_rate = _horner(c_dec, x, True)
        third, _ = _horner(c_third, x, False)
        dxdt = s.dxdt
        return ra, dec, third, ra_rate * dxdt, dec_rate * dxdt


def parse(data, name="almanac file", decoded=False):
    """Bytes of a ``.lca`` file -> ``AlmanacYear`` (in the decoded form when ``decoded``).
    Raises ``AlmanacError`` naming ``name`` and the problem when the file is truncated,
    corrupt or of another format."""
    n = len(data)
    if n < _HEADER_SIZE + 4:
        raise AlmanacError("%s: truncated (%d bytes)" % (name, n))
    if data[:4] != MAGIC:
        raise AlmanacError("%s: not a limbclock almanac file (bad magic %r)" % (name, bytes(data[:4])))
    (crc,) = struct.unpack("<I", data[n - 4:n])
    if binascii.crc32(memoryview(data)[:n - 4]) & 0xFFFFFFFF != crc:
        raise AlmanacError("%s: checksum mismatch (corrupt or truncated file)" % name)
    _, version, nbodies, year, start_day = struct.unpack(_HEADER, data[:_HEADER_SIZE])
    if version != VERSION:
        raise AlmanacError("%s: format version %d, this engine reads version %d" % (name, version, VERSION))
    pos = _HEADER_SIZE
    series = []
    try:
        for _ in range(nbodies):
            code, seg_days, nseg, data_offset = struct.unpack(_BODY, data[pos:pos + _BODY_SIZE])
            pos += _BODY_SIZE
            if code >= len(BODIES) or seg_days == 0 or nseg == 0:
                raise AlmanacError("%s: bad body block (body %d, %d-day segments, %d segments)"
                                   % (name, code, seg_days, nseg))
            qs = []
            for _ in range(3):
                degree, qexp = struct.unpack("<Bb", data[pos:pos + 2])
                widths = tuple(data[pos + 2:pos + 3 + degree])
                if len(widths) != degree + 1 or max(widths) > 30:
                    raise AlmanacError("%s: bad quantity header" % name)
                pos += 3 + degree
                qs.append(_Quantity(degree, qexp, widths))
            s = _BodySeries(BODIES[code], seg_days, nseg, data_offset, qs)
            if data_offset < _HEADER_SIZE or data_offset * 8 + nseg * s.seg_bits > (n - 4) * 8:
                raise AlmanacError("%s: %s data runs past the end of the file" % (name, BODIES[code]))
            series.append(s)
    except (struct.error, IndexError, TypeError):
        raise AlmanacError("%s: truncated header" % name)
    return AlmanacYear(year, start_day * US_PER_DAY, data, series, decoded)


def _data_dir():
    f = __file__
    cut = max(f.rfind("/"), f.rfind("\\"))
    return (f[:cut] if cut >= 0 else ".") + "/data"


def _listdir(path):
    try:
        import os
    except ImportError:         # some MicroPython ports call it uos
        import uos as os
    return os, os.listdir(path)


class Almanac(object):
    """The almanac over a directory of ``YYYY.lca`` files, read lazily one year at a time.

    ``keep_years`` parsed years are kept (the most recently used).  ``decoded``
    chooses the form of each kept year (see ``AlmanacYear``): packed on a board,
    decoded on a host, where ``load()`` also keeps every year."""

    def __init__(self, path, years, keep_years=2, decoded=False):
        self.path = path
        self.years = years          # sorted list of available years
        self.keep_years = keep_years
        self.decoded = decoded
        self._cache = []            # [(year, AlmanacYear)], most recent last
        self._year_days = [timescale.days_from_civil(y, 1, 1) for y in years]
        self._year_days.append(timescale.days_from_civil(years[-1] + 1, 1, 1))     # first day of each year, and the end
        self._first_us = self._year_days[0] * US_PER_DAY
        self._end_us = self._year_days[-1] * US_PER_DAY
        self._by_year = {}          # decoded form: the kept years by number (the same objects as _cache)
        self._day = None            # UTC day of the last instant: its year file and TT - UTC
        self._day_year = None
        self._day_tt_us = 0
        self._era_t_us = None       # instant and DUT1 of the last Earth rotation angle, and the angle
        self._era_dut1_us = 0
        self._era = 0.0

    def __repr__(self):
        return "Almanac(%r, %d-%d)" % (self.path, self.first_year, self.last_year)

    @property
    def first_year(self):
        return self.years[0]

    @property
    def last_year(self):
        return self.years[-1]

    def span_us(self):
        """(first instant covered, first instant no longer covered), UTC."""
        return self._first_us, self._end_us

    def year(self, y):
        """The parsed ``AlmanacYear`` for UTC year ``y`` (read and checked on first use)."""
        a = self._by_year.get(y)
        if a is not None:
            return a
        for yy, a in self._cache:
            if yy == y:
                return a
        if y not in self.years:
            raise AlmanacError("year %d is outside the almanac (%d-%d)" % (y, self.first_year, self.last_year))
        name = "%s/%d.lca" % (self.path, y)
        try:
            with open(name, "rb") as f:
                data = f.read()
        except OSError as e:
            raise AlmanacError("%s: cannot be read (%s)" % (name, e))
        a = parse(data, name, self.decoded)
        if a.year != y:
            raise AlmanacError("%s: holds year %d" % (name, a.year))
        self._cache.append((y, a))
        if self.decoded:
            self._by_year[y] = a
        if len(self._cache) > self.keep_years:
            self._by_year.pop(self._cache.pop(0)[0], None)
        return a

    def position(self, body, t_us, dut1_us=0):
        """Apparent geocentric place of ``body`` ('sun' or 'moon') at UTC instant ``t_us``
        (int microseconds), with UT1 = UTC + ``dut1_us``.  Returns a ``Position``:
        ``gha_deg`` [0, 360), ``dec_deg``, ``sd_arcmin``, ``hp_arcmin``,
        ``gha_rate_deg_per_s``, ``dec_rate_deg_per_s``."""
        if body not in BODIES:
            raise AlmanacError("body must be 'sun' or 'moon', got %r" % (body,))
        if not isinstance(t_us, int):
            raise AlmanacError("instant must be an int of microseconds, got %r" % (t_us,))
        if not isinstance(dut1_us, int) or not -60000000 < dut1_us < 60000000:
            raise AlmanacError("dut1_us must be an int of microseconds (|DUT1| < 0.9 s today), got %r"
                               % (dut1_us,))
        if not self._first_us <= t_us < self._end_us:
            raise AlmanacError("instant %s is outside the almanac (%d-01-01 to %d-12-31)"
                               % (timescale.format_utc(t_us), self.first_year, self.last_year))
        day = t_us // US_PER_DAY
        if day != self._day:        # TT - UTC and the year change only between UTC days
            starts = self._year_days
            i = (day - starts[0]) * 4 // 1461           # whole Julian years: at most one off
            if i > len(starts) - 2:
                i = len(starts) - 2
            while starts[i] > day:
                i -= 1
            while starts[i + 1] <= day:
                i += 1
            self._day_year = self.year(self.years[i])
            self._day_tt_us = timescale.tt_minus_utc_us(t_us)
            self._day = day
        ra, dec, third, ra_rate, dec_rate = self._day_year._eval(body, t_us + self._day_tt_us)
        if t_us != self._era_t_us or dut1_us != self._era_dut1_us:     # Sun and Moon at one instant share it
            self._era = _float(timescale.era_deg(t_us, dut1_us))
            self._era_t_us = t_us
            self._era_dut1_us = dut1_us
        gha = (self._era - ra) % _float(360.0)
        if gha >= 360.0:            # a tiny negative remainder can round up to 360
            gha = _float(0.0)
        if body == "sun":
            sd = third
            hp = third * _float(SUN_HP_PER_SD)
        else:
            hp = third
            sd = math.asin(_float(MOON_K) * math.sin(hp * _float(math.pi / 10800.0))) * _float(10800.0 / math.pi)
        return Position(body, t_us, gha, dec, sd, hp, _float(ERA_RATE_DEG_PER_S) - ra_rate, dec_rate)


def _on_host():
    """True under CPython (a host), False under MicroPython (a board)."""
    import sys
    impl = getattr(sys, "implementation", None)
    return getattr(impl, "name", "micropython") != "micropython"


def load(path=None, keep_years=None, decoded=None):
    """The ``Almanac`` over the ``YYYY.lca`` files in directory ``path``
    (default: the shipped ``engine/data``).  Files are read when first needed.

    ``decoded`` (default: True on a host, False under MicroPython) keeps each
    year's segments decoded once used (``AlmanacYear``); ``keep_years`` parsed
    years are kept (default: every year when decoded, else 2; a packed year is
    its file, about 3 KB)."""
    if decoded is None:
        decoded = _on_host()
    if path is None:
        path = _data_dir()
    while len(path) > 1 and path[-1] in "/\\":
        path = path[:-1]
    try:
        _, names = _listdir(path)
    except OSError:
        raise AlmanacError("almanac directory %s not found" % path)
    years = []
    for n in names:
        if n.endswith(".lca") and len(n) == 8 and n[:4].isdigit():
            years.append(int(n[:4]))
    years.sort()
    if not years:
        raise AlmanacError("no almanac files (YYYY.lca) in %s" % path)
    for i in range(1, len(years)):
        if years[i] != years[i - 1] + 1:
            raise AlmanacError("almanac files in %s skip from %d to %d" % (path, years[i - 1], years[i]))
    if keep_years is None:
        keep_years = len(years) if decoded else 2
    return Almanac(path, years, keep_years, decoded)


def describe_shipped(path=None):
    """What the almanac in ``path`` (default: shipped) covers: a dict with ``dir``,
    ``first_utc``, ``last_utc`` (last instant covered), ``years``, ``files`` and ``bytes``."""
    alm = load(path)
    os, _ = _listdir(alm.path)
    files = []
    total = 0
    for y in alm.years:
        name = "%s/%d.lca" % (alm.path, y)
        size = os.stat(name)[6]
        files.append({"file": "%d.lca" % y, "bytes": size})
        total += size
    first, end = alm.span_us()
    return {"dir": alm.path, "first_utc": timescale.format_utc(first, 0),
            "last_utc": timescale.format_utc(end - US_PER_S, 0),
            "years": "%d-%d" % (alm.first_year, alm.last_year), "files": files, "bytes": total}
