"""Reference places of the Sun and Moon over the almanac's span 2025-2050.

Writes ``vectors/almanac_reference.json``, read by ``tests/test_almanac.py``
(engine vs reference at the accuracy targets) and ``bench/bench_almanac.py``.
Regenerate with ``.venv/bin/python -m vectors.generate_almanac`` (or ``make vectors``).

Method: ``vectors.reference.apparent`` (JPL DE421 through jplephem; ERFA for
TDB, light deflection, aberration, IAU 2006/2000A precession-nutation with the
CIO, Earth rotation angle; DUT1 = 0, polar motion ignored; see that module).
Instants: 2000 drawn uniformly over 2025-01-01..2050-12-31 UTC with a fixed
seed (numpy ``default_rng(20290803)``), plus the edges of every year (its first
microsecond, and its last), each for both bodies.  Values are printed to
1e-7 deg and 1e-5 arcmin (half a unit of the last digit is 0.0002' or less).
"""
import json
import os
import time

import numpy as np

from engine.timescale import days_from_civil, format_utc
from engine.constants import US_PER_DAY
from vectors import reference

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "almanac_reference.json")
FIRST_YEAR, LAST_YEAR = 2025, 2050
SEED = 20290803
N_RANDOM = 2000
COLUMNS = ["utc", "body", "gha_deg", "dec_deg", "sd_arcmin", "hp_arcmin"]


def instants():
    lo = days_from_civil(FIRST_YEAR, 1, 1) * US_PER_DAY
    hi = days_from_civil(LAST_YEAR + 1, 1, 1) * US_PER_DAY
    rng = np.random.default_rng(SEED)
    t = list(rng.integers(lo, hi, N_RANDOM, dtype=np.int64))
    for y in range(FIRST_YEAR, LAST_YEAR + 1):
        t.append(days_from_civil(y, 1, 1) * US_PER_DAY)
        t.append(days_from_civil(y + 1, 1, 1) * US_PER_DAY - 1)
    return np.array(sorted(set(int(x) for x in t)), dtype=np.int64)


def main():
    t = instants()
    rows = []
    for body in reference.BODIES:
        r = reference.apparent(body, t)
        for i, ti in enumerate(t):
            rows.append([format_utc(int(ti), 6), body, round(float(r["gha_deg"][i]), 7),
                         round(float(r["dec_deg"][i]), 7), round(float(r["sd_arcmin"][i]), 5),
                         round(float(r["hp_arcmin"][i]), 5)])
    header = {
        "format": "limbclock-vectors/1",
        "kind": "almanac_reference",
        "generated_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "generator": "vectors/generate_almanac.py",
        "libraries": reference.library_versions(),
        "method": "apparent geocentric places (vectors/reference.py): DE421 light-time corrected, "
                  "light deflection (Moon), annual aberration, IAU 2006/2000A GCRS->CIRS; "
                  "GHA = ERA(UT1) - RA(CIO) with DUT1 = 0, polar motion ignored; "
                  "Sun SD = 959.63\"/r_au, Moon sin SD = 0.2725076 sin HP, sin HP = 6378.137 km/distance",
        "instants": "%d seeded-random (seed %d) over %d-%d plus every year's first and last microsecond"
                    % (N_RANDOM, SEED, FIRST_YEAR, LAST_YEAR),
        "columns": COLUMNS,
    }
    with open(OUT, "w") as f:
        f.write("{\"header\": %s,\n \"rows\": [\n" % json.dumps(header))
        f.write(",\n".join("  " + json.dumps(r) for r in rows))
        f.write("\n]}\n")
    print("wrote %s (%d rows)" % (OUT, len(rows)))


def load():
    """(header, rows) of ``vectors/almanac_reference.json``."""
    with open(OUT) as f:
        doc = json.load(f)
    return doc["header"], doc["rows"]


if __name__ == "__main__":
    main()
