"""NMEA 0183 time sentences: RMC and ZDA from any talker (GP, GN, GL, GA, BD...).

Field layouts as published in receiver manuals (NMEA 0183 sentences, as GPS receivers document them):

* ``$--RMC,hhmmss.ss,A|V,lat,N|S,lon,E|W,sog,cog,ddmmyy,magvar,E|W[,mode[,nav]]*hh``
* ``$--ZDA,hhmmss.ss,dd,mm,yyyy,zone_h,zone_m*hh``

The checksum is the XOR of every byte between ``$`` and ``*``, as two hex
digits.  A sentence with a bad or missing checksum, a void RMC (status ``V``),
blank fields (a ZDA before lock) or any malformed field is ignored and
counted, never trusted.  A label is the UTC instant (int microseconds) the
sentence names; the clock pairs it with a PPS edge.

RMC carries a two-digit year, read as 20yy.  A receiver that lost track of the
GPS week rollover (IS-GPS-200: the 10-bit week number wraps every 1024 weeks)
reports a date 1024 weeks early; a date before ``EARLIEST_DAY`` is moved on by
1024 weeks and counted in ``rollover`` (still earlier: malformed).  A second of 60 (leap second) cannot be
named in POSIX time and is skipped (counted in ``leap``).
"""
from engine.timescale import days_from_civil, civil_from_days
from engine.constants import US_PER_S, US_PER_DAY

MAX_SENTENCE = 82                       # NMEA 0183 limit incl. $ and CR LF [from memory]
EARLIEST_DAY = days_from_civil(2026, 1, 1)   # no correct receiver reports an earlier date to this firmware
ROLLOVER_DAYS = 1024 * 7                # 1024 GPS weeks (IS-GPS-200, 10-bit week number [from memory])


def checksum(body):
    """XOR of the bytes of ``body`` (the text between ``$`` and ``*``)."""
    c = 0
    for b in body:
        c ^= b
    return c


class Label:
    """A time label: ``utc_us`` (int), ``whole`` (True when it names a whole second), ``kind`` ('RMC'/'ZDA')."""
    __slots__ = ("utc_us", "whole", "kind")

    def __init__(self, utc_us, whole, kind):
        self.utc_us = utc_us
        self.whole = whole
        self.kind = kind


def _int(text):
    if not text or not text.isdigit():
        raise ValueError(text)
    return int(text)


def _time_us(field):
    """``hhmmss[.ss]`` -> (seconds of day, fraction in us)."""
    if len(field) < 6:
        raise ValueError(field)
    hh = _int(field[0:2])
    mm = _int(field[2:4])
    ss = _int(field[4:6])
    frac_us = 0
    if len(field) > 6:
        if field[6] != "." or len(field) == 7:
            raise ValueError(field)
        f = field[7:]
        _int(f)
        frac_us = int((f + "000000")[:6])
    if hh > 23 or mm > 59 or ss > 60:
        raise ValueError(field)
    return hh * 3600 + mm * 60 + ss, frac_us


class Parser:
    """Feed bytes from the GPS UART with ``feed``; returns the ``Label`` list of valid time sentences.

    Counters: ``good``, ``bad_checksum``, ``void``, ``blank``, ``malformed``,
    ``other`` (valid sentences that are not RMC/ZDA), ``rollover``, ``leap``."""
    __slots__ = ("line", "good", "bad_checksum", "void", "blank", "malformed", "other",
                 "rollover", "leap", "in_line")

    def __init__(self):
        self.line = bytearray()
        self.in_line = False
        self.good = self.bad_checksum = self.void = self.blank = 0
        self.malformed = self.other = self.rollover = self.leap = 0

    def counters(self):
        return {"good": self.good, "bad_checksum": self.bad_checksum, "void": self.void,
                "blank": self.blank, "malformed": self.malformed, "other": self.other,
                "rollover": self.rollover, "leap": self.leap}

    def feed(self, data):
        out = []
        for b in data:
            if b == 0x24:                      # '$' starts a sentence, whatever came before
                if self.in_line:
                    self.malformed += 1
                self.line = bytearray()
                self.in_line = True
            elif not self.in_line:
                continue
            elif b == 0x0A or b == 0x0D:
                self.in_line = False
                lab = self.sentence(bytes(self.line))
                if lab is not None:
                    out.append(lab)
            elif len(self.line) >= MAX_SENTENCE:
                self.in_line = False
                self.malformed += 1
            else:
                self.line.append(b)
        return out

    def sentence(self, raw):
        """One sentence without ``$`` and line end (``GPRMC,...*hh``) -> Label or None (counted)."""
        star = raw.find(b"*")
        if star < 0 or len(raw) != star + 3:
            self.bad_checksum += 1
            return None
        try:
            want = int(raw[star + 1:].decode(), 16)
        except (ValueError, UnicodeError):
            self.bad_checksum += 1
            return None
        body = raw[:star]
        if checksum(body) != want:
            self.bad_checksum += 1
            return None
        try:
            text = body.decode()
        except UnicodeError:
            self.malformed += 1
            return None
        f = text.split(",")
        if len(f[0]) != 5 or not f[0].isalpha():
            self.malformed += 1
            return None
        kind = f[0][2:]
        try:
            if kind == "RMC":
                return self._rmc(f)
            if kind == "ZDA":
                return self._zda(f)
        except ValueError:
            self.malformed += 1
            return None
        self.other += 1
        return None

    def _rmc(self, f):
        if len(f) < 12:
            raise ValueError("RMC fields")
        if f[2] == "V":
            self.void += 1
            return None
        if f[2] != "A":
            raise ValueError("RMC status")
        if not f[1] or not f[9]:
            self.blank += 1
            return None
        date = f[9]
        if len(date) != 6:
            raise ValueError(date)
        d, m, yy = _int(date[0:2]), _int(date[2:4]), _int(date[4:6])
        return self._label(2000 + yy, m, d, f[1], "RMC")

    def _zda(self, f):
        if len(f) < 7:
            raise ValueError("ZDA fields")
        if not f[1] or not f[2] or not f[3] or not f[4]:
            self.blank += 1
            return None
        return self._label(_int(f[4]), _int(f[3]), _int(f[2]), f[1], "ZDA")

    def _label(self, y, m, d, tfield, kind):
        if not (1 <= m <= 12 and 1 <= d <= 31 and 1972 <= y <= 2099):
            raise ValueError("date")
        sod, frac_us = _time_us(tfield)
        day = days_from_civil(y, m, d)
        if civil_from_days(day) != (y, m, d):
            raise ValueError("date")
        if tfield[4:6] == "60":
            self.leap += 1
            return None
        if day < EARLIEST_DAY:
            if day + ROLLOVER_DAYS < EARLIEST_DAY:
                raise ValueError("date before this firmware")
            day += ROLLOVER_DAYS
            self.rollover += 1
        self.good += 1
        return Label(day * US_PER_DAY + sod * US_PER_S + frac_us, frac_us == 0, kind)
