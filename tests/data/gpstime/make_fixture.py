"""GPS -> UTC reference values for glitchbook's gps_to_utc.

Made with Astropy 8.0.2: astropy.time.Time(gps, format="gps", scale="tai")
converted with .utc.isot (Astropy's GPS format counts SI seconds from
1980-01-06 00:00:00 UTC and its UTC scale applies the IERS leap seconds).
Times span every leap second since 1980 (one second before, at, and after
each) and a few ordinary times. Run: python3 make_fixture.py > utc.json
"""
import json
import astropy
from astropy.time import Time
from astropy.utils import iers

iers.conf.auto_download = False
leaps = ["1981-07-01", "1982-07-01", "1983-07-01", "1985-07-01", "1988-01-01",
         "1990-01-01", "1991-01-01", "1992-07-01", "1993-07-01", "1994-07-01",
         "1996-01-01", "1997-07-01", "1999-01-01", "2006-01-01", "2009-01-01",
         "2012-07-01", "2015-07-01", "2017-01-01"]
times = [0.0, 1.5, 123456789.0, 630720013.0, 1000000000.0, 1400000000.0, 1400007198.0,
         1700000000.25, 2000000000.0]
for d in leaps:
    g = float(Time(d + "T00:00:00", scale="utc").gps)
    times += [g - 2.0, g - 1.0, g - 0.5, g, g + 1.0]
rows = []
for g in sorted(set(times)):
    rows.append({"gps": g, "utc": Time(g, format="gps").utc.isot})
print(json.dumps({"source": f"astropy {astropy.__version__}: Time(gps, format='gps').utc.isot",
                  "rows": rows}, indent=1))
