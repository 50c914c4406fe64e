"""Physical and conventional constants, each with its unit and source."""

US_PER_S = 1000000                      # microseconds per second
US_PER_DAY = 86400000000                # microseconds per day (UTC day, POSIX style)
UNIX_EPOCH_JD = 2440587.5               # JD of 1970-01-01T00:00:00 (Meeus, Astronomical Algorithms, ch. 7)
J2000_UNIX_DAYS = 10957                 # whole days from 1970-01-01 to 2000-01-01 (derived: days_from_civil)
J2000_JD = 2451545.0                    # JD of J2000.0 (IAU 1976)

TT_MINUS_TAI_US = 32184000              # TT - TAI = 32.184 s (IAU 1991 Res. A4; IAU 2000 Res. B1.9)
GPS_MINUS_TAI_S = -19                   # GPS = TAI - 19 s (IS-GPS-200)

# Earth rotation angle, IERS Conventions 2010 eq. 5.15:
# theta = 2*pi*(0.7790572732640 + 1.00273781191135448 * (JD_UT1 - 2451545.0))
ERA_AT_J2000_TURNS = 0.7790572732640
ERA_RATE_EXTRA_TURNS_PER_DAY = 0.00273781191135448

WGS84_A_M = 6378137.0                   # WGS 84 semi-major axis (NIMA TR8350.2)
WGS84_F = 1.0 / 298.257223563           # WGS 84 flattening (NIMA TR8350.2)
EARTH_RADIUS_NM = 3437.74677            # 1 nmi = 1 arcmin of a great circle: 180*60/pi (derived)
AU_KM = 149597870.7                     # astronomical unit (IAU 2012 Res. B2)
SUN_SD_1AU_ARCSEC = 959.63              # solar semi-diameter at 1 AU (Explanatory Supplement to the Astronomical Almanac [from memory])
MOON_K = 0.2725076                      # Moon radius / Earth equatorial radius (IAU 1982; NA uses 0.2724)
