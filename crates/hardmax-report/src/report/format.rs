//! Deterministic number formatting for plots and the HTML report.
//!
//! Shown text is rounded for reading; the exact value goes into `data-value` attributes with
//! [`raw_value`] (Rust's shortest round-trip form), so the report stays traceable to the CSV.

use crate::units::format_si;

/// How a quantity is written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum NumberKind {
    /// A share in [0, 1], written in per cent ("93.4 %").
    Percent,
    /// A physical quantity in SI base units, written with an SI prefix ("10 nA").
    Si(String),
    /// A plain count ("200").
    Count,
    /// A dimensionless number ("0.25", "1.5e-5").
    Plain,
}

/// The exact value as a string that parses back to the same `f64`.
pub fn raw_value(v: f64) -> String {
    format!("{v}")
}

/// A dimensionless number with `digits` significant digits; plain decimals between 1e-3 and
/// 1e6, scientific notation outside.
pub fn fmt_plain(v: f64, digits: usize) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = digits.max(1);
    let mag = v.abs().log10().floor() as i32;
    if (-3..6).contains(&mag) {
        let decimals = (digits as i32 - 1 - mag).max(0) as usize;
        let mut s = format!("{v:.decimals$}");
        if s.contains('.') {
            s = s.trim_end_matches('0').trim_end_matches('.').to_string();
        }
        s
    } else {
        let s = format!("{:.*e}", digits - 1, v);
        // Trim trailing zeros of the mantissa: 1.500e-5 -> 1.5e-5.
        match s.split_once('e') {
            Some((m, e)) if m.contains('.') => {
                format!("{}e{e}", m.trim_end_matches('0').trim_end_matches('.'))
            }
            _ => s,
        }
    }
}

/// A quantity with its unit: SI prefixes when there is a unit, plain otherwise.
pub fn fmt_quantity(v: f64, unit: &str, digits: usize) -> String {
    if unit.is_empty() {
        fmt_plain(v, digits)
    } else {
        format_si(v, unit, digits)
    }
}

/// A share in per cent with one decimal ("93.4 %").
pub fn fmt_percent(v: f64) -> String {
    format!("{:.1} %", v * 100.0)
}

/// Write `v` as `kind` for the report.
pub fn fmt_kind(v: f64, kind: &NumberKind) -> String {
    match kind {
        NumberKind::Percent => fmt_percent(v),
        NumberKind::Si(unit) => fmt_quantity(v, unit, 4),
        NumberKind::Count => {
            if v.fract() == 0.0 && v.abs() < 1e15 {
                format!("{}", v as i64)
            } else {
                fmt_plain(v, 4)
            }
        }
        NumberKind::Plain => fmt_plain(v, 4),
    }
}

/// Seconds as a duration for people ("12.3 s", "4 min 05 s", "2 h 03 min").
pub fn fmt_duration(s: f64) -> String {
    if !s.is_finite() || s < 0.0 {
        return format!("{s} s");
    }
    if s < 60.0 {
        return format_si(s, "s", 3);
    }
    let total = s.round() as u64;
    let (h, m, sec) = (total / 3600, (total % 3600) / 60, total % 60);
    if h > 0 {
        format!("{h} h {m:02} min")
    } else {
        format!("{m} min {sec:02} s")
    }
}

/// A Unix time in seconds as a UTC date and time ("2026-12-02 04:22:19 UTC").
/// Civil-from-days conversion (proleptic Gregorian calendar), H. Hinnant, "chrono-Compatible
/// Low-Level Date Algorithms" (published online, 2013).
pub fn fmt_unix_utc(t: f64) -> String {
    if !t.is_finite() {
        return format!("{t}");
    }
    let secs = t.floor() as i64;
    let days = secs.div_euclid(86_400);
    let sod = secs.rem_euclid(86_400);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02}:{:02} UTC",
        sod / 3600,
        (sod % 3600) / 60,
        sod % 60
    )
}

/// Escape text for HTML/XML content and attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn raw_value_round_trips() {
        for v in [0.1, 1.0 / 3.0, 1e-9, 0.9345, 123456.789, 5e-324] {
            assert_eq!(raw_value(v).parse::<f64>().unwrap(), v);
        }
    }

    #[test]
    fn plain_numbers() {
        assert_eq!(fmt_plain(0.25, 4), "0.25");
        assert_eq!(fmt_plain(1234.5678, 4), "1235");
        assert_eq!(fmt_plain(1.5e-5, 4), "1.5e-5");
        assert_eq!(fmt_plain(2.0e7, 3), "2e7");
        assert_eq!(fmt_plain(-0.0125, 2), "-0.013");
    }

    #[test]
    fn percents_and_counts() {
        assert_eq!(fmt_percent(0.9345), "93.5 %");
        assert_eq!(fmt_kind(200.0, &NumberKind::Count), "200");
        assert_eq!(fmt_kind(1e-8, &NumberKind::Si("A".into())), "10 nA");
        assert_eq!(fmt_kind(0.5, &NumberKind::Si(String::new())), "0.5");
    }

    #[test]
    fn durations() {
        assert_eq!(fmt_duration(12.3), "12.3 s");
        assert_eq!(fmt_duration(245.0), "4 min 05 s");
        assert_eq!(fmt_duration(7380.0), "2 h 03 min");
    }

    #[test]
    fn unix_times() {
        // Reference values from GNU coreutils `date -u -d @SECONDS` (an outside implementation):
        // the epoch; 951868800 s = 2000-03-01 (right after a 400-year leap day);
        assert_eq!(fmt_unix_utc(0.0), "1970-01-01 00:00:00 UTC");
        assert_eq!(fmt_unix_utc(11_017.0 * 86_400.0), "2000-03-01 00:00:00 UTC");
        // 1796000000 s = 2026-11-30 00:53:20.
        assert_eq!(fmt_unix_utc(1_796_000_000.0), "2026-11-30 00:53:20 UTC");
    }

    #[test]
    fn escapes_markup() {
        assert_eq!(esc("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
