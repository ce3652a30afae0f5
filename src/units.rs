//! Physical quantities with SI prefixes and units ("10 nA", "1.5 um", "300 K", "27 degC").
//!
//! Parsing lives here (see the issue for the foundation); formatting for labels and reports is
//! [`format_si`].

/// Format `value` (in base SI units) with an engineering SI prefix and `unit`, e.g.
/// `format_si(1.0e-8, "A", 3)` = `"10 nA"`. `digits` is the number of significant digits.
/// Zero, non-finite values and values outside the prefix range are written plainly.
pub fn format_si(value: f64, unit: &str, digits: usize) -> String {
    const PREFIXES: [(i32, &str); 11] = [
        (-18, "a"),
        (-15, "f"),
        (-12, "p"),
        (-9, "n"),
        (-6, "µ"),
        (-3, "m"),
        (0, ""),
        (3, "k"),
        (6, "M"),
        (9, "G"),
        (12, "T"),
    ];
    let sep = if unit.is_empty() { "" } else { " " };
    if value == 0.0 || !value.is_finite() {
        return format!("{value}{sep}{unit}");
    }
    let digits = digits.max(1);
    // Round to the requested significant digits first, so 999.96e-9 becomes 1 µ, not 1000 n.
    let mag = value.abs().log10().floor() as i32;
    let scale = 10f64.powi(digits as i32 - 1 - mag);
    let rounded = (value * scale).round() / scale;
    let exp3 = (rounded.abs().log10().floor() as i32).div_euclid(3) * 3;
    let Some(&(e, p)) = PREFIXES.iter().find(|(e, _)| *e == exp3) else {
        return format!("{value:e}{sep}{unit}");
    };
    let mantissa = rounded / 10f64.powi(e);
    let int_digits = (mantissa.abs().log10().floor() as i32 + 1).max(1) as usize;
    let decimals = digits.saturating_sub(int_digits);
    let mut text = format!("{mantissa:.decimals$}");
    if text.contains('.') {
        text = text.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    format!("{text}{sep}{p}{unit}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats_with_prefixes() {
        assert_eq!(format_si(1.0e-8, "A", 3), "10 nA");
        assert_eq!(format_si(1.5e-6, "m", 3), "1.5 µm");
        assert_eq!(format_si(999.96e-9, "A", 3), "1 µA");
        assert_eq!(format_si(300.0, "K", 3), "300 K");
        assert_eq!(format_si(-2.5e-3, "V", 2), "-2.5 mV");
        assert_eq!(format_si(0.0, "A", 3), "0 A");
        assert_eq!(format_si(0.25, "", 2), "250m");
    }
}
