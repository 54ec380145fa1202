//! GPS time to UTC for people reading pages and tables: GPS seconds count
//! SI seconds from 1980-01-06 00:00:00 UTC without leap seconds, UTC
//! inserts one at the end of the days listed in `LEAP_DAYS` (IERS
//! Bulletin C; GPS − UTC = 18 s since 2017-01-01). Checked against Astropy
//! (`tests/data/gpstime/utc.json`, every leap second since 1980).
//!
//! No leap second after 2016-12-31 is in this table; if the IERS announces
//! one, times after it read one second late until the table is extended.

/// Days (as `(year, month)` of the first day after the inserted second)
/// on which GPS − UTC grew by one second.
const LEAP_DAYS: [(i64, i64); 18] = [
    (1981, 7),
    (1982, 7),
    (1983, 7),
    (1985, 7),
    (1988, 1),
    (1990, 1),
    (1991, 1),
    (1992, 7),
    (1993, 7),
    (1994, 7),
    (1996, 1),
    (1997, 7),
    (1999, 1),
    (2006, 1),
    (2009, 1),
    (2012, 7),
    (2015, 7),
    (2017, 1),
];

/// Unix time of the GPS epoch, 1980-01-06 00:00:00 UTC \[s\].
const GPS_EPOCH_UNIX: i64 = 315_964_800;

/// Days since 1970-01-01 of a civil date (proleptic Gregorian; the
/// algorithm of H. Hinnant, "chrono-Compatible Low-Level Date Algorithms").
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Civil date of a day count since 1970-01-01 (inverse of
/// [`days_from_civil`]).
fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    (
        if m <= 2 {
            yoe + era * 400 + 1
        } else {
            yoe + era * 400
        },
        m,
        d,
    )
}

/// GPS time at which each leap day begins (after its inserted second).
fn leap_starts_gps() -> [i64; 18] {
    let mut out = [0; 18];
    for (k, &(y, m)) in LEAP_DAYS.iter().enumerate() {
        out[k] = days_from_civil(y, m, 1) * 86_400 - GPS_EPOCH_UNIX + (k as i64 + 1);
    }
    out
}

/// UTC of a GPS time as ISO 8601 `YYYY-MM-DDThh:mm:ss` with `decimals`
/// decimals of the second (truncated, like a clock); a leap second reads
/// `23:59:60`. None before the GPS epoch or beyond year 9999.
pub fn gps_to_utc(gps: f64, decimals: usize) -> Option<String> {
    if !(0.0..=2.5e11).contains(&gps) {
        return None;
    }
    let whole = gps.floor() as i64;
    let frac = gps - gps.floor();
    let starts = leap_starts_gps();
    let passed = starts.iter().filter(|&&s| whole >= s).count() as i64;
    let in_leap = starts.contains(&(whole + 1));
    // In an inserted second, read the day's last ordinary second and call it 60.
    let unix = whole + GPS_EPOCH_UNIX - passed - i64::from(in_leap);
    let (days, secs) = (unix.div_euclid(86_400), unix.rem_euclid(86_400));
    let (y, mo, d) = civil_from_days(days);
    let (h, mi, s) = (secs / 3600, secs / 60 % 60, secs % 60 + i64::from(in_leap));
    let mut out = format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}");
    if decimals > 0 {
        let scale = 10f64.powi(decimals as i32);
        let digits = ((frac * scale) + 1e-6).floor().min(scale - 1.0) as u64;
        out.push_str(&format!(".{digits:0decimals$}"));
    }
    Some(out)
}

/// `gps` as UTC for a page or table: `YYYY-MM-DD hh:mm:ss UTC`, or "-".
pub fn utc_label(gps: f64) -> String {
    gps_to_utc(gps, 0).map_or_else(|| "-".to_string(), |s| s.replace('T', " ") + " UTC")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn civil_round_trip() {
        for z in [-1000, 0, 3652, 10_957, 20_000, 2_932_896] {
            let (y, m, d) = civil_from_days(z);
            assert_eq!(days_from_civil(y, m, d), z);
        }
        // 1980-01-06 is day 3657 after 1970-01-01 (315964800 / 86400).
        assert_eq!(days_from_civil(1980, 1, 6), 3657);
    }

    #[test]
    fn matches_astropy_over_every_leap_second() {
        // Reference: Astropy 8.0.2, Time(gps, format="gps").utc.isot
        // (tests/data/gpstime/make_fixture.py).
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/data/gpstime/utc.json"
        ))
        .unwrap();
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        let rows = v["rows"].as_array().unwrap();
        assert!(rows.len() >= 90);
        for r in rows {
            let gps = r["gps"].as_f64().unwrap();
            let want = r["utc"].as_str().unwrap();
            assert_eq!(gps_to_utc(gps, 3).as_deref(), Some(want), "GPS {gps}");
        }
    }

    #[test]
    fn labels() {
        assert_eq!(utc_label(0.0), "1980-01-06 00:00:00 UTC");
        assert_eq!(utc_label(-1.0), "-");
        assert_eq!(utc_label(f64::NAN), "-");
    }
}
