"""Offline fitter of the compact almanac (``engine/data/YYYY.lca``).

For each UTC year and body, the reference pipeline (``vectors/reference.py``:
DE421 + ERFA apparent places) is sampled at the Chebyshev-Lobatto nodes
x_j = cos(pi j / N), j = 0..N, of consecutive segments of fixed length in TT;
the degree-N interpolating Chebyshev series goes through both segment ends, so
neighbouring segments meet (to the quantum) and the series is continuous.
Coefficients are rounded to a power-of-two quantum per quantity, trailing
all-zero coefficients dropped, and each coefficient position k gets the bit
width its largest integer needs; the file format is documented in
``engine/almanac.py``.  Every year is then checked against the reference on a
dense grid and the maxima are reported (``fit_year`` returns them).

Time argument: TT, because the apparent places are smooth in TT/TDB and the
leap seconds of UTC would otherwise break a segment; the evaluator converts
UTC -> TT with ``engine.timescale.utc_to_tt`` (leap-second table).  A file for
year Y starts at 00:00 TT two days before 1 January of Y and runs at least
two days past its end.

Layout chosen by measuring size and error (see ``bench/bench_almanac.py``):
Sun 32-day segments, degree <= 13 (RA, dec), <= 8 (SD), quanta 2**-17 deg and
2**-13'; Moon 8-day segments, degree <= 14 (RA, dec), <= 9 (HP), quanta
2**-17 deg and 2**-11'.
"""
import binascii
import os
import struct

import numpy as np

from engine import almanac as alm
from engine.constants import US_PER_DAY
from engine.timescale import days_from_civil
from host.errors import UserError
from vectors import reference

MARGIN_DAYS = 2
# body -> (segment days, max degrees (ra, dec, third), quantum exponents (ra, dec, third))
LAYOUT = {
    "sun": (32, (13, 13, 8), (-17, -17, -13)),
    "moon": (8, (14, 14, 9), (-17, -17, -11)),
}
CHECK_STEP_MIN = {"sun": 120, "moon": 30}   # dense check grid per body, minutes
MAX_WIDTH = 29                              # keeps every decoded integer a small int on a board


def _third(body, distance_km):
    sd, hp = reference.sd_hp_arcmin(body, distance_km)
    return sd if body == "sun" else hp


def fit_body(body, start_tt_us, nseg, seg_days, degree, qexp):
    """Integer Chebyshev coefficients of one body: a list of 3 int64 arrays (nseg, N_q + 1)."""
    seg_us = seg_days * US_PER_DAY
    out = []
    cache = {}
    for qi in range(3):
        n = degree[qi]
        if n not in cache:
            x = np.cos(np.pi * np.arange(n + 1) / n)                          # 1 .. -1, ends included
            off = np.round((x + 1.0) / 2.0 * seg_us).astype(np.int64)
            tt = (start_tt_us + np.arange(nseg, dtype=np.int64)[:, None] * seg_us + off[None, :]).ravel()
            r = reference.apparent_cirs(body, reference.utc_from_tt(tt), tt_us=tt)
            xs = (2.0 * off - seg_us) / seg_us
            T = np.cos(np.outer(np.arange(n + 1), np.arccos(np.clip(xs, -1.0, 1.0))))   # T_k(x_j)
            cache[n] = (r, T)
        r, T = cache[n]
        if qi == 0:
            v = np.degrees(np.unwrap(np.radians(r["ra_cio_deg"].reshape(nseg, n + 1)), axis=1))
        elif qi == 1:
            v = r["dec_deg"].reshape(nseg, n + 1)
        else:
            v = _third(body, r["distance_km"]).reshape(nseg, n + 1)
        c = np.linalg.solve(T.T, v.T).T                                      # v_j = sum_k c_k T_k(x_j)
        if qi == 0:
            c[:, 0] = (c[:, 0] + 180.0) % 360.0 - 180.0
        ci = np.round(c / 2.0 ** qexp[qi]).astype(np.int64)
        keep = n + 1
        while keep > 1 and not ci[:, keep - 1].any():
            keep -= 1
        out.append(ci[:, :keep])
    return out


def widths_of(ci):
    """Bit width per coefficient position (two's complement; 0 when all are zero)."""
    w = []
    for k in range(ci.shape[1]):
        col = ci[:, k]
        if not col.any():
            w.append(0)
            continue
        need = max(int(col.max()).bit_length(), int((-col.min() - 1)).bit_length() if col.min() < 0 else 0) + 1
        if need > MAX_WIDTH:
            raise ValueError("coefficient %d needs %d bits (> %d): lower the quantum" % (k, need, MAX_WIDTH))
        w.append(need)
    return w


class _BitWriter:
    def __init__(self):
        self.bits = []

    def put(self, value, width):
        if width == 0:
            return
        v = int(value) & ((1 << width) - 1)
        self.bits.extend((v >> (width - 1 - i)) & 1 for i in range(width))

    def tobytes(self):
        b = self.bits + [0] * (-len(self.bits) % 8)
        return bytes(int("".join(map(str, b[i:i + 8])), 2) for i in range(0, len(b), 8))


def encode(year, start_day, bodies):
    """Bytes of a ``.lca`` file.  ``bodies``: list of (name, seg_days, nseg, [(qexp, int coeffs)] x 3)."""
    head = struct.pack("<4sBBHi", alm.MAGIC, alm.VERSION, len(bodies), year, start_day)
    blocks = []
    datas = []
    for name, seg_days, nseg, qs in bodies:
        meta = b""
        w_all = []
        for qexp, ci in qs:
            w = widths_of(ci)
            w_all.append(w)
            meta += struct.pack("<Bb", len(w) - 1, qexp) + bytes(w)
        bw = _BitWriter()
        for i in range(nseg):
            for (qexp, ci), w in zip(qs, w_all):
                for k, wk in enumerate(w):
                    bw.put(ci[i, k], wk)
        blocks.append((alm.BODIES.index(name), seg_days, nseg, meta))
        datas.append(bw.tobytes())
    header_len = len(head) + sum(8 + len(b[3]) for b in blocks)
    offset = header_len
    out = head
    for (code, seg_days, nseg, meta), d in zip(blocks, datas):
        out += struct.pack("<BBHI", code, seg_days, nseg, offset) + meta
        offset += len(d)
    out += b"".join(datas)
    return out + struct.pack("<I", binascii.crc32(out) & 0xFFFFFFFF)


def _eval_numpy(ci, qexp, x):
    """Vectorised evaluation of integer series ci (m, N+1) at x (m,) -> values (m,)."""
    T = np.cos(np.outer(np.arccos(np.clip(x, -1.0, 1.0)), np.arange(ci.shape[1])))   # (m, N+1)
    return np.sum(ci * T, axis=1) * 2.0 ** qexp


def check_year(year, start_day, fitted, utc_margin_days=1):
    """Max |error| of the fitted series vs the reference on a dense grid over the UTC year
    (plus ``utc_margin_days``).  Returns {body: {"gha_arcmin", "dec_arcmin", "sd_arcmin", "hp_arcmin"}}."""
    start_tt = start_day * US_PER_DAY
    first = (days_from_civil(year, 1, 1) - utc_margin_days) * US_PER_DAY
    end = (days_from_civil(year + 1, 1, 1) + utc_margin_days) * US_PER_DAY
    result = {}
    for name, seg_days, nseg, qs in fitted:
        step = CHECK_STEP_MIN[name] * 60 * 1000000
        t = np.arange(first, end, step, dtype=np.int64)
        r = reference.apparent_cirs(name, t)
        tt = t + reference.tt_minus_utc_us(t)
        seg_us = seg_days * US_PER_DAY
        idx = (tt - start_tt) // seg_us
        x = (2.0 * (tt - start_tt - idx * seg_us) - seg_us) / seg_us
        vals = [_eval_numpy(ci[idx], qexp, x) for qexp, ci in qs]
        sd_ref, hp_ref = reference.sd_hp_arcmin(name, r["distance_km"])
        if name == "sun":
            sd = vals[2]
            hp = sd * alm.SUN_HP_PER_SD
        else:
            hp = vals[2]
            sd = np.degrees(np.arcsin(alm.MOON_K * np.sin(np.radians(hp / 60.0)))) * 60.0
        result[name] = {
            "gha_arcmin": float(np.max(np.abs((vals[0] - r["ra_cio_deg"] + 180.0) % 360.0 - 180.0)) * 60.0),
            "dec_arcmin": float(np.max(np.abs(vals[1] - r["dec_deg"])) * 60.0),
            "sd_arcmin": float(np.max(np.abs(sd - sd_ref))),
            "hp_arcmin": float(np.max(np.abs(hp - hp_ref))),
            "points": int(t.size)}
    return result


def fit_year(year):
    """(bytes of the ``.lca`` file for UTC year ``year``, error report from ``check_year``)."""
    start_day = days_from_civil(year, 1, 1) - MARGIN_DAYS
    span_days = days_from_civil(year + 1, 1, 1) + MARGIN_DAYS - start_day
    fitted = []
    for name in alm.BODIES:
        seg_days, degree, qexp = LAYOUT[name]
        nseg = -(-span_days // seg_days)
        ci = fit_body(name, start_day * US_PER_DAY, nseg, seg_days, degree, qexp)
        fitted.append((name, seg_days, nseg, list(zip(qexp, ci))))
    data = encode(year, start_day, fitted)
    return data, check_year(year, start_day, fitted)


def fit_years(first_year, last_year, out_dir, progress=print):
    """Fit and write ``out_dir/YYYY.lca`` for each year; returns {year: (bytes, report)}."""
    if first_year > last_year:
        raise UserError("first year %d is after last year %d" % (first_year, last_year))
    if first_year < 1973 or last_year > 2052:
        raise UserError("years must lie within 1973..2052 (the leap-second table starts in 1972; "
                         "DE421 ends on 2053-10-09)")
    os.makedirs(out_dir, exist_ok=True)
    results = {}
    for year in range(first_year, last_year + 1):
        data, report = fit_year(year)
        path = os.path.join(out_dir, "%d.lca" % year)
        with open(path, "wb") as f:
            f.write(data)
        results[year] = (len(data), report)
        if progress:
            s, m = report["sun"], report["moon"]
            progress("%d  %5d bytes  Sun GHA %.4f' dec %.4f' SD %.4f'   Moon GHA %.4f' dec %.4f' HP %.4f'  -> %s"
                     % (year, len(data), s["gha_arcmin"], s["dec_arcmin"], s["sd_arcmin"],
                        m["gha_arcmin"], m["dec_arcmin"], m["hp_arcmin"], path))
    return results
