//! Physical quantities with SI prefixes and units ("10 nA", "1.5 um", "300 K", "27 degC").
//!
//! [`parse_quantity`] reads a quantity written by a user and returns it in SI base units after
//! checking its dimension; [`quantity_from_toml`] does the same for a TOML value (a bare number
//! is taken in base units). Formatting for labels and reports is [`format_si`].
//!
//! Accepted forms:
//! - a plain number, for a dimensionless quantity only: `0.05`, `300`, `-1.5`; a quantity with a
//!   dimension needs its unit (`27` for a temperature is refused: write `27 degC` or `300.15 K`),
//!   so no number is read in an unintended unit;
//! - a number, optional spaces, then a unit: `10 nA`, `1.5um`, `8.5 fF/um^2`, `300 uA/V^2`,
//!   `5 mV um`, `5 mV*um`, `5 mV·um`, `1 %um`, `-1.5 mV/K`, `10 MHz`, `1 kohm`, `1 kΩ`;
//! - a temperature in Celsius: `27 degC`, `27 °C`, `27 ℃` (= 300.15 K); inside a compound unit
//!   a Celsius degree is an interval equal to a kelvin (`-1.5 mV/degC` = -1.5 mV/K);
//! - a percentage where a fraction is expected: `5 %` = 0.05.
//!
//! A unit is a product of factors separated by spaces, `*`, `·` or `/` (left to right: `a/b*c` =
//! `a c / b`); each factor is an optional SI prefix (`a f p n u µ m k M Meg G T`), a unit symbol
//! (`A V m K s F ohm Ω S Hz J W C %`) and an optional exponent (`^2`, `^-1`, `²`, `³`). A symbol
//! alone wins over prefix + symbol, so `m` is a metre and `mm` a millimetre. Symbols are case
//! sensitive (`mV` is a millivolt, `MV` a megavolt).

use thiserror::Error;

/// The physical dimension a quantity must have. Each has a base unit (see
/// [`Dimension::base_unit`]) in which hardmax stores it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Dimension {
    /// Electric current, A.
    Current,
    /// Electric potential, V.
    Voltage,
    /// Length, m.
    Length,
    /// Area, m^2.
    Area,
    /// Absolute temperature, K (must be above 0 K).
    Temperature,
    /// Time, s.
    Time,
    /// Capacitance, F.
    Capacitance,
    /// Resistance, Ω.
    Resistance,
    /// Frequency, Hz.
    Frequency,
    /// A pure number; `%` and `ppm` allowed.
    Dimensionless,
    /// Voltage times length, V·m: the Pelgrom threshold constant A_VT (1 mV·µm = 1e-9 V·m).
    VoltageLength,
    /// Fraction times length, m: the Pelgrom current-factor constant A_beta (1 %·µm = 1e-8 m).
    FractionLength,
    /// Current per volt squared, A/V^2: mu C_ox or beta.
    Transconductance,
    /// Voltage per kelvin, V/K: a threshold temperature coefficient.
    VoltagePerKelvin,
    /// Voltage per length, V/m: an Early voltage per channel length ("10 V/um").
    VoltagePerLength,
    /// Capacitance per area, F/m^2: the gate oxide capacitance C_ox.
    CapacitancePerArea,
    /// Energy, J.
    Energy,
    /// Power, W.
    Power,
}

/// Exponents of (m, kg, s, A, K).
type Dims = [i8; 5];

const DIMS_NONE: Dims = [0, 0, 0, 0, 0];

impl Dimension {
    /// Every dimension, in declaration order.
    pub const ALL: [Dimension; 18] = [
        Dimension::Current,
        Dimension::Voltage,
        Dimension::Length,
        Dimension::Area,
        Dimension::Temperature,
        Dimension::Time,
        Dimension::Capacitance,
        Dimension::Resistance,
        Dimension::Frequency,
        Dimension::Dimensionless,
        Dimension::VoltageLength,
        Dimension::FractionLength,
        Dimension::Transconductance,
        Dimension::VoltagePerKelvin,
        Dimension::VoltagePerLength,
        Dimension::CapacitancePerArea,
        Dimension::Energy,
        Dimension::Power,
    ];

    /// The SI base unit hardmax stores this dimension in, for labels and CSV headers.
    pub fn base_unit(&self) -> &'static str {
        match self {
            Dimension::Current => "A",
            Dimension::Voltage => "V",
            Dimension::Length => "m",
            Dimension::Area => "m²",
            Dimension::Temperature => "K",
            Dimension::Time => "s",
            Dimension::Capacitance => "F",
            Dimension::Resistance => "Ω",
            Dimension::Frequency => "Hz",
            Dimension::Dimensionless => "",
            Dimension::VoltageLength => "V·m",
            Dimension::FractionLength => "m",
            Dimension::Transconductance => "A/V²",
            Dimension::VoltagePerKelvin => "V/K",
            Dimension::VoltagePerLength => "V/m",
            Dimension::CapacitancePerArea => "F/m²",
            Dimension::Energy => "J",
            Dimension::Power => "W",
        }
    }

    /// A human name, e.g. "a current".
    pub fn name(&self) -> &'static str {
        match self {
            Dimension::Current => "a current",
            Dimension::Voltage => "a voltage",
            Dimension::Length => "a length",
            Dimension::Area => "an area",
            Dimension::Temperature => "a temperature",
            Dimension::Time => "a time",
            Dimension::Capacitance => "a capacitance",
            Dimension::Resistance => "a resistance",
            Dimension::Frequency => "a frequency",
            Dimension::Dimensionless => "a plain number",
            Dimension::VoltageLength => "a voltage times length (A_VT)",
            Dimension::FractionLength => "a fraction times length (A_beta)",
            Dimension::Transconductance => "a current per volt squared (mu C_ox, beta)",
            Dimension::VoltagePerKelvin => "a voltage per kelvin",
            Dimension::VoltagePerLength => "a voltage per length (Early voltage per L)",
            Dimension::CapacitancePerArea => "a capacitance per area",
            Dimension::Energy => "an energy",
            Dimension::Power => "a power",
        }
    }

    /// Examples of accepted spellings, for error messages and help.
    pub fn example(&self) -> &'static str {
        match self {
            Dimension::Current => "\"10 nA\"",
            Dimension::Voltage => "\"250 mV\"",
            Dimension::Length => "\"1.5 um\"",
            Dimension::Area => "\"2 um^2\"",
            Dimension::Temperature => "\"300 K\" or \"27 degC\"",
            Dimension::Time => "\"2 ns\"",
            Dimension::Capacitance => "\"100 fF\"",
            Dimension::Resistance => "\"1 kohm\"",
            Dimension::Frequency => "\"10 MHz\"",
            Dimension::Dimensionless => "\"0.05\" or \"5 %\"",
            Dimension::VoltageLength => "\"5 mV um\"",
            Dimension::FractionLength => "\"1 %um\" or \"0.01 um\"",
            Dimension::Transconductance => "\"300 uA/V^2\"",
            Dimension::VoltagePerKelvin => "\"-1.5 mV/K\"",
            Dimension::VoltagePerLength => "\"10 V/um\"",
            Dimension::CapacitancePerArea => "\"8.5 fF/um^2\"",
            Dimension::Energy => "\"1 pJ\"",
            Dimension::Power => "\"10 uW\"",
        }
    }

    fn dims(&self) -> Dims {
        match self {
            Dimension::Current => [0, 0, 0, 1, 0],
            Dimension::Voltage => [2, 1, -3, -1, 0],
            Dimension::Length | Dimension::FractionLength => [1, 0, 0, 0, 0],
            Dimension::Area => [2, 0, 0, 0, 0],
            Dimension::Temperature => [0, 0, 0, 0, 1],
            Dimension::Time => [0, 0, 1, 0, 0],
            Dimension::Capacitance => [-2, -1, 4, 2, 0],
            Dimension::Resistance => [2, 1, -3, -2, 0],
            Dimension::Frequency => [0, 0, -1, 0, 0],
            Dimension::Dimensionless => DIMS_NONE,
            Dimension::VoltageLength => [3, 1, -3, -1, 0],
            Dimension::Transconductance => [-4, -2, 6, 3, 0],
            Dimension::VoltagePerKelvin => [2, 1, -3, -1, -1],
            Dimension::VoltagePerLength => [1, 1, -3, -1, 0],
            Dimension::CapacitancePerArea => [-4, -1, 4, 2, 0],
            Dimension::Energy => [2, 1, -2, 0, 0],
            Dimension::Power => [2, 1, -3, 0, 0],
        }
    }
}

/// What was wrong with a quantity's text.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum UnitProblem {
    #[error("the text is empty")]
    Empty,
    #[error("it does not start with a number")]
    NoNumber,
    #[error("the number is not finite (NaN or infinity)")]
    NotFinite,
    #[error("\"{0}\" is not a unit or prefix hardmax knows{hint}(units: A V m K s F ohm Ω S Hz J W C % ppm degC; prefixes: a f p n u µ m k M Meg G T)", hint = did_you_mean(.1))]
    UnknownUnit(String, Option<String>),
    #[error("{} has no unit: write {}", short_number(*.number), no_unit_advice(*.number, .dim))]
    NoUnit { number: f64, dim: Dimension },
    #[error("unexpected text \"{0}\" after the number")]
    TrailingText(String),
    #[error("the unit \"{unit}\" is {found}, not the expected dimension")]
    WrongDimension { unit: String, found: String },
    #[error("the temperature is {0} K, at or below absolute zero")]
    NonPositiveTemperature(f64),
    #[error("a TOML {0} is not a quantity: give a number in base units or a string with a unit")]
    NotAQuantity(&'static str),
}

/// A quantity that could not be read: the text, what was expected (with an example), and why.
#[derive(Clone, Debug, PartialEq, Error)]
#[error("{}", unit_error_text(.text, .expected, .problem))]
pub struct UnitError {
    /// The text as given.
    pub text: String,
    /// The dimension that was expected.
    pub expected: Dimension,
    /// What was wrong.
    pub problem: UnitProblem,
}

fn unit_error_text(text: &str, expected: &Dimension, problem: &UnitProblem) -> String {
    match problem {
        // "27 has no unit: write "27 degC" or "300.15 K"": the advice is the whole message.
        UnitProblem::NoUnit { .. } => problem.to_string(),
        _ => format!(
            "cannot read \"{text}\" as {}: {problem}; write e.g. {}{}",
            expected.name(),
            expected.example(),
            match expected {
                Dimension::Dimensionless => " or a plain fraction",
                _ => "",
            }
        ),
    }
}

fn did_you_mean(s: &Option<String>) -> String {
    match s {
        Some(s) => format!(" (did you mean \"{s}\"?) "),
        None => " ".into(),
    }
}

/// Short decimal text of `v` without float noise (12 significant digits at most; an exponent
/// for very small or large magnitudes: "1e-7", not "0.0000001").
pub fn short_number(v: f64) -> String {
    let t = format!("{:.12e}", v);
    let x: f64 = t.parse().unwrap_or(v);
    let s = format!("{x:?}");
    match s.strip_suffix(".0") {
        Some(int) => int.to_string(),
        None => s,
    }
}

/// What to write instead of a bare number for a dimensioned quantity: the number with the
/// base unit (with a prefix), and for a temperature both readings (Celsius and kelvin).
fn no_unit_advice(number: f64, dim: &Dimension) -> String {
    if *dim == Dimension::Temperature {
        let zc = crate::physics::ZERO_CELSIUS;
        return if number < 150.0 {
            format!(
                "\"{} degC\" or \"{} K\"",
                short_number(number),
                short_number(number + zc)
            )
        } else {
            format!(
                "\"{} K\" or \"{} degC\"",
                short_number(number),
                short_number(number - zc)
            )
        };
    }
    let unit = match dim.base_unit() {
        "Ω" => "ohm",
        u => u,
    };
    format!(
        "it with its unit, e.g. \"{}\" if you mean {} {unit}, or {}",
        format_si(number, unit, 12),
        short_number(number),
        dim.example()
    )
}

/// A unit written with the wrong letter case ("na", "mv"): the spelling that reads as the
/// expected dimension, if exactly one prefix + symbol fits.
fn case_suggestion(unit: &str, dim: Dimension) -> Option<String> {
    const SYMBOLS: [&str; 12] = [
        "A", "V", "m", "K", "s", "F", "ohm", "Hz", "S", "J", "W", "C",
    ];
    let want = unit.to_lowercase();
    let mut prefixes: Vec<&str> = PREFIXES.iter().map(|(p, _)| *p).collect();
    prefixes.insert(0, "");
    for p in prefixes {
        for s in SYMBOLS {
            let cand = format!("{p}{s}");
            if cand.to_lowercase() == want && cand != unit {
                if let Ok((_, d)) = parse_unit(&cand) {
                    if d == dim.dims() {
                        return Some(cand);
                    }
                }
            }
        }
    }
    None
}

const PREFIXES: [(&str, f64); 13] = [
    ("a", 1e-18),
    ("f", 1e-15),
    ("p", 1e-12),
    ("n", 1e-9),
    ("u", 1e-6),
    ("\u{b5}", 1e-6),
    ("\u{3bc}", 1e-6),
    ("m", 1e-3),
    ("k", 1e3),
    ("Meg", 1e6),
    ("M", 1e6),
    ("G", 1e9),
    ("T", 1e12),
];

/// Unit symbols: (symbol, scale to SI, dims).
const SYMBOLS: [(&str, f64, Dims); 16] = [
    ("A", 1.0, [0, 0, 0, 1, 0]),
    ("V", 1.0, [2, 1, -3, -1, 0]),
    ("m", 1.0, [1, 0, 0, 0, 0]),
    ("K", 1.0, [0, 0, 0, 0, 1]),
    ("s", 1.0, [0, 0, 1, 0, 0]),
    ("F", 1.0, [-2, -1, 4, 2, 0]),
    ("ohm", 1.0, [2, 1, -3, -2, 0]),
    ("Ohm", 1.0, [2, 1, -3, -2, 0]),
    ("\u{3a9}", 1.0, [2, 1, -3, -2, 0]),
    ("\u{2126}", 1.0, [2, 1, -3, -2, 0]),
    ("S", 1.0, [-2, -1, 3, 2, 0]),
    ("Hz", 1.0, [0, 0, -1, 0, 0]),
    ("J", 1.0, [2, 1, -2, 0, 0]),
    ("W", 1.0, [2, 1, -3, 0, 0]),
    ("C", 1.0, [0, 0, 1, 1, 0]),
    ("ppm", 1e-6, DIMS_NONE),
];

/// Length in bytes of the leading number of `s` (sign, digits, point, exponent), 0 if none.
/// `number * scale`, correctly rounded when `scale` is a power of ten: "50 nA" gives exactly the
/// double nearest 5e-8 (not 50 * 1e-9, which is one unit in the last place off).
fn scale_exact(num_text: &str, number: f64, scale: f64) -> f64 {
    if scale > 0.0 && scale.is_finite() {
        let k = scale.log10().round() as i32;
        if 10f64.powi(k) == scale || (10f64.powi(k) - scale).abs() <= scale * 4.0 * f64::EPSILON {
            let t = num_text.trim();
            let (mantissa, exp) = match t.find(['e', 'E']) {
                Some(i) => (&t[..i], t[i + 1..].parse::<i32>().ok()),
                None => (t, Some(0)),
            };
            if let Some(e) = exp {
                if let Ok(v) = format!("{mantissa}e{}", e + k).parse::<f64>() {
                    return v;
                }
            }
        }
    }
    number * scale
}

fn number_len(s: &str) -> usize {
    let b = s.as_bytes();
    let mut i = 0;
    if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
        i += 1;
    }
    let mut digits = 0;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
        digits += 1;
    }
    if i < b.len() && b[i] == b'.' {
        i += 1;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
            digits += 1;
        }
    }
    if digits == 0 {
        return 0;
    }
    // An exponent only if 'e'/'E' is followed by digits (optionally signed).
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        let mut j = i + 1;
        if j < b.len() && (b[j] == b'+' || b[j] == b'-') {
            j += 1;
        }
        let start = j;
        while j < b.len() && b[j].is_ascii_digit() {
            j += 1;
        }
        if j > start {
            i = j;
        }
    }
    i
}

fn is_separator(c: char) -> bool {
    c.is_whitespace() || c == '*' || c == '\u{b7}' || c == '\u{22c5}'
}

/// A unit symbol with optional prefix, e.g. "mV", "um", "Megohm", "m", "%".
fn parse_symbol(tok: &str) -> Option<(f64, Dims)> {
    if tok == "%" {
        return Some((0.01, DIMS_NONE));
    }
    // Inside a compound unit a Celsius degree is a temperature *interval*, equal to a kelvin
    // ("-1.5 mV/degC"). Alone it is an absolute temperature, handled by the caller.
    if matches!(tok, "degC" | "\u{b0}C" | "\u{2103}") {
        return Some((1.0, [0, 0, 0, 0, 1]));
    }
    if let Some(&(_, scale, dims)) = SYMBOLS.iter().find(|(s, _, _)| *s == tok) {
        return Some((scale, dims));
    }
    for (p, pscale) in PREFIXES {
        if let Some(rest) = tok.strip_prefix(p) {
            if let Some(&(_, scale, dims)) = SYMBOLS.iter().find(|(s, _, _)| *s == rest) {
                // "ppm" takes no prefix.
                if rest != "ppm" {
                    return Some((pscale * scale, dims));
                }
            }
        }
    }
    None
}

/// Splits a factor into symbol and exponent: "um^2" -> ("um", 2), "m²" -> ("m", 2).
fn split_exponent(tok: &str) -> Option<(&str, i32)> {
    if let Some((sym, exp)) = tok.split_once('^') {
        let e: i32 = exp.parse().ok()?;
        if !(-9..=9).contains(&e) {
            return None;
        }
        Some((sym, e))
    } else if let Some(sym) = tok.strip_suffix('\u{b2}') {
        Some((sym, 2))
    } else if let Some(sym) = tok.strip_suffix('\u{b3}') {
        Some((sym, 3))
    } else {
        Some((tok, 1))
    }
}

/// Parses a unit expression into (scale to SI, dims).
fn parse_unit(unit: &str) -> Result<(f64, Dims), UnitProblem> {
    let mut scale = 1.0;
    let mut dims = DIMS_NONE;
    let mut divide = false;
    let mut rest = unit;
    loop {
        rest = rest.trim_start_matches(is_separator);
        if rest.is_empty() {
            break;
        }
        if let Some(r) = rest.strip_prefix('/') {
            if divide {
                return Err(UnitProblem::TrailingText(rest.to_string()));
            }
            divide = true;
            rest = r;
            continue;
        }
        // '%' is a factor of its own, so "%um" reads as "% um".
        let end = if rest.starts_with('%') {
            1
        } else {
            rest.find(|c: char| is_separator(c) || c == '/' || c == '%')
                .unwrap_or(rest.len())
        };
        let (tok, after) = rest.split_at(end);
        let (sym, exp) =
            split_exponent(tok).ok_or_else(|| UnitProblem::UnknownUnit(tok.to_string(), None))?;
        let (s, d) = match parse_symbol(sym) {
            Some(x) => x,
            None if sym.starts_with(|c: char| c.is_alphabetic()) => {
                return Err(UnitProblem::UnknownUnit(tok.to_string(), None))
            }
            None => return Err(UnitProblem::TrailingText(rest.to_string())),
        };
        let e = if divide { -exp } else { exp };
        scale *= s.powi(e);
        for (acc, di) in dims.iter_mut().zip(d) {
            *acc = acc.saturating_add(di.saturating_mul(e as i8));
        }
        divide = false;
        rest = after;
    }
    if divide {
        return Err(UnitProblem::TrailingText("/".to_string()));
    }
    Ok((scale, dims))
}

/// A readable name for a dimension vector: a known dimension's name, else its SI expression.
fn describe_dims(d: Dims) -> String {
    if let Some(k) = Dimension::ALL.iter().find(|k| k.dims() == d) {
        return format!("{} ({})", k.name(), k.base_unit());
    }
    // Common dimensions hardmax does not take as input, named for clearer messages.
    const OTHERS: [(Dims, &str); 3] = [
        ([-2, -1, 3, 2, 0], "a conductance (S = A/V)"),
        ([0, 0, 1, 1, 0], "a charge (C)"),
        ([0, 1, 0, 0, 0], "a mass (kg)"),
    ];
    if let Some((_, name)) = OTHERS.iter().find(|(k, _)| *k == d) {
        return name.to_string();
    }
    let names = ["m", "kg", "s", "A", "K"];
    let parts: Vec<String> = names
        .iter()
        .zip(d)
        .filter(|(_, e)| *e != 0)
        .map(|(n, e)| {
            if e == 1 {
                n.to_string()
            } else {
                format!("{n}^{e}")
            }
        })
        .collect();
    format!("a quantity in {}", parts.join("·"))
}

/// Parse `text` as a quantity of dimension `dim` and return it in SI base units.
///
/// See the module docs for the accepted forms. Errors name the text, the expected dimension with
/// an accepted example, and what was wrong.
pub fn parse_quantity(text: &str, dim: Dimension) -> Result<f64, UnitError> {
    parse_inner(text, dim).map_err(|problem| UnitError {
        text: text.to_string(),
        expected: dim,
        problem,
    })
}

fn parse_inner(text: &str, dim: Dimension) -> Result<f64, UnitProblem> {
    let s = text.trim();
    if s.is_empty() {
        return Err(UnitProblem::Empty);
    }
    let unsigned = s.trim_start_matches(['+', '-']).to_ascii_lowercase();
    if unsigned.starts_with("nan") || unsigned.starts_with("inf") {
        return Err(UnitProblem::NotFinite);
    }
    let n = number_len(s);
    if n == 0 {
        return Err(UnitProblem::NoNumber);
    }
    let (num, unit) = s.split_at(n);
    let number: f64 = num.parse().map_err(|_| UnitProblem::NoNumber)?;
    if !number.is_finite() {
        return Err(UnitProblem::NotFinite);
    }
    let unit = unit.trim();
    let value = if unit.is_empty() {
        if dim != Dimension::Dimensionless {
            return Err(UnitProblem::NoUnit { number, dim });
        }
        number
    } else if matches!(unit, "degC" | "\u{b0}C" | "\u{2103}") {
        if dim != Dimension::Temperature {
            return Err(UnitProblem::WrongDimension {
                unit: unit.to_string(),
                found: describe_dims(Dimension::Temperature.dims()),
            });
        }
        number + crate::physics::ZERO_CELSIUS
    } else {
        let (scale, dims) = parse_unit(unit).map_err(|p| match p {
            UnitProblem::UnknownUnit(tok, None) if tok == unit => {
                let hint = case_suggestion(unit, dim);
                UnitProblem::UnknownUnit(tok, hint)
            }
            p => p,
        })?;
        if dims != dim.dims() {
            return Err(UnitProblem::WrongDimension {
                unit: unit.to_string(),
                found: describe_dims(dims),
            });
        }
        scale_exact(num, number, scale)
    };
    check_value(value, dim)
}

/// A bare number: only for a dimensionless quantity.
fn plain(value: f64, dim: Dimension) -> Result<f64, UnitProblem> {
    if dim != Dimension::Dimensionless && value.is_finite() {
        return Err(UnitProblem::NoUnit { number: value, dim });
    }
    check_value(value, dim)
}

fn check_value(value: f64, dim: Dimension) -> Result<f64, UnitProblem> {
    if !value.is_finite() {
        return Err(UnitProblem::NotFinite);
    }
    if dim == Dimension::Temperature && value <= 0.0 {
        return Err(UnitProblem::NonPositiveTemperature(value));
    }
    Ok(value)
}

/// Read a TOML value as a quantity: a string is parsed with [`parse_quantity`]; an integer or
/// float is accepted only for a dimensionless quantity (a dimensioned one needs its unit).
/// Other TOML types are an error.
pub fn quantity_from_toml(value: &toml::Value, dim: Dimension) -> Result<f64, UnitError> {
    let err = |problem| UnitError {
        text: value.to_string(),
        expected: dim,
        problem,
    };
    match value {
        toml::Value::String(s) => parse_quantity(s, dim),
        toml::Value::Integer(i) => plain(*i as f64, dim).map_err(err),
        toml::Value::Float(f) => plain(*f, dim).map_err(err),
        toml::Value::Boolean(_) => Err(err(UnitProblem::NotAQuantity("boolean"))),
        toml::Value::Datetime(_) => Err(err(UnitProblem::NotAQuantity("date-time"))),
        toml::Value::Array(_) => Err(err(UnitProblem::NotAQuantity("array"))),
        toml::Value::Table(_) => Err(err(UnitProblem::NotAQuantity("table"))),
    }
}

/// The engineering SI prefixes used when writing quantities: (power of ten, prefix).
pub const ENGINEERING_PREFIXES: [(i32, &str); 11] = [
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

/// Format `value` (in base SI units) with an engineering SI prefix and `unit`, e.g.
/// `format_si(1.0e-8, "A", 3)` = `"10 nA"`. `digits` is the number of significant digits.
/// Zero, non-finite values and values outside the prefix range are written plainly.
pub fn format_si(value: f64, unit: &str, digits: usize) -> String {
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
    let Some(&(e, p)) = ENGINEERING_PREFIXES.iter().find(|(e, _)| *e == exp3) else {
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
    use approx::assert_relative_eq;

    fn ok(text: &str, dim: Dimension) -> f64 {
        match parse_quantity(text, dim) {
            Ok(v) => v,
            Err(e) => panic!("{text:?} should parse: {e}"),
        }
    }

    /// Checks a rejection and that its message shows the text, the expected dimension's example
    /// and the given fragment describing the problem.
    fn rejected(text: &str, dim: Dimension, fragment: &str) {
        let e = match parse_quantity(text, dim) {
            Ok(v) => panic!("{text:?} should be rejected, got {v}"),
            Err(e) => e,
        };
        let msg = e.to_string();
        assert!(msg.contains(&format!("\"{text}\"")), "{msg}");
        assert!(msg.contains(dim.name()), "{msg}");
        assert!(msg.contains(dim.example()), "{msg}");
        assert!(msg.contains(fragment), "{msg} (wanted {fragment:?})");
    }

    /// SI prefixes and units (BIPM, The International System of Units, 9th ed., 2019).
    #[test]
    fn accepts_si_spellings() {
        use Dimension::*;
        let cases: &[(&str, Dimension, f64)] = &[
            ("1e-8 A", Current, 1e-8),
            ("10 nA", Current, 10e-9),
            ("10nA", Current, 10e-9),
            ("  -3.5e2 pA ", Current, -350e-12),
            ("1.5um", Length, 1.5e-6),
            ("1.5 µm", Length, 1.5e-6),
            ("1.5 \u{3bc}m", Length, 1.5e-6),
            ("2 m", Length, 2.0),
            ("3 mm", Length, 3e-3),
            ("180 nm", Length, 180e-9),
            ("2 um^2", Area, 2e-12),
            ("2 um²", Area, 2e-12),
            ("2 um*um", Area, 2e-12),
            ("250 mV", Voltage, 0.25),
            ("1.8 V", Voltage, 1.8),
            ("300 K", Temperature, 300.0),
            ("300 K", Temperature, 300.0),
            ("27 degC", Temperature, 300.15),
            ("27 °C", Temperature, 300.15),
            ("27 ℃", Temperature, 300.15),
            ("-40 degC", Temperature, 233.15),
            ("2 ns", Time, 2e-9),
            ("1.5 ms", Time, 1.5e-3),
            ("100 fF", Capacitance, 100e-15),
            ("1 kohm", Resistance, 1e3),
            ("1 kΩ", Resistance, 1e3),
            ("2.2 Megohm", Resistance, 2.2e6),
            ("2.2 MOhm", Resistance, 2.2e6),
            ("10 MHz", Frequency, 10e6),
            ("10 MegHz", Frequency, 10e6),
            ("1 GHz", Frequency, 1e9),
            ("5 %", Dimensionless, 0.05),
            ("5%", Dimensionless, 0.05),
            ("0.05", Dimensionless, 0.05),
            ("200 ppm", Dimensionless, 2e-4),
            ("5 mV um", VoltageLength, 5e-9),
            ("5 mV*um", VoltageLength, 5e-9),
            ("5 mV·um", VoltageLength, 5e-9),
            ("5 mV⋅µm", VoltageLength, 5e-9),
            ("5e-9 V m", VoltageLength, 5e-9),
            ("1 %um", FractionLength, 1e-8),
            ("1 % um", FractionLength, 1e-8),
            ("1 %·µm", FractionLength, 1e-8),
            ("0.01 um", FractionLength, 1e-8),
            ("300 uA/V^2", Transconductance, 300e-6),
            ("300 uA/V²", Transconductance, 300e-6),
            ("300 uA/V/V", Transconductance, 300e-6),
            ("-1.5 mV/K", VoltagePerKelvin, -1.5e-3),
            ("10 V/um", VoltagePerLength, 1e7),
            ("-1.5 mV/degC", VoltagePerKelvin, -1.5e-3),
            ("-1.5 mV/°C", VoltagePerKelvin, -1.5e-3),
            ("8.5 fF/um^2", CapacitancePerArea, 8.5e-3),
            ("8.5 fF/um²", CapacitancePerArea, 8.5e-3),
            ("1 pJ", Energy, 1e-12),
            ("10 uW", Power, 10e-6),
            // Consistent SI combinations are the same dimension.
            ("1 V*A", Power, 1.0),
            ("3 /s", Frequency, 3.0),
        ];
        for &(text, dim, want) in cases {
            assert_relative_eq!(ok(text, dim), want, epsilon = 0.0, max_relative = 1e-12);
        }
    }

    #[test]
    fn rejects_with_explaining_messages() {
        use Dimension::*;
        rejected("10 nV", Current, "a voltage (V)");
        rejected("1.5 um", Area, "a length (m)");
        rejected("27 degC", Voltage, "a temperature");
        rejected("5 mV", VoltageLength, "a voltage (V)");
        rejected("1 m*kg", Length, "not a unit");
        rejected("10 nQ", Current, "\"nQ\" is not a unit");
        rejected("10 xA", Current, "\"xA\" is not a unit");
        rejected("10 n", Current, "\"n\" is not a unit");
        rejected("10 na", Current, "did you mean \"nA\"?");
        rejected("3 mv", Voltage, "did you mean \"mV\"?");
        rejected("", Current, "empty");
        rejected("   ", Current, "empty");
        rejected("nA", Current, "does not start with a number");
        rejected("NaN", Current, "not finite");
        rejected("-inf A", Current, "not finite");
        rejected("1e999 A", Current, "not finite");
        rejected("10 nA extra", Current, "\"extra\" is not a unit");
        rejected("10,5 nA", Current, "unexpected text \",5 nA\"");
        rejected("1.2.3 V", Voltage, "unexpected text");
        rejected("1 uA/", Current, "unexpected text \"/\"");
        rejected("0 K", Temperature, "at or below absolute zero");
        rejected("-300 degC", Temperature, "at or below absolute zero");
        rejected("300 uA/V", Transconductance, "a conductance (S = A/V)");
        rejected("3 V*K", Voltage, "a quantity in m^2·kg·s^-3·A^-1·K");
        rejected("x", Dimensionless, "or a plain fraction");
    }

    /// A bare number is refused wherever the quantity has a dimension (a temperature of 27 would
    /// otherwise be read as 27 K), with the spelling to write instead; dimensionless ones accept it.
    #[test]
    fn bare_numbers_need_a_unit_when_dimensioned() {
        let e = parse_quantity("27", Dimension::Temperature)
            .unwrap_err()
            .to_string();
        assert_eq!(e, "27 has no unit: write \"27 degC\" or \"300.15 K\"");
        let e = parse_quantity("300", Dimension::Temperature)
            .unwrap_err()
            .to_string();
        assert_eq!(e, "300 has no unit: write \"300 K\" or \"26.85 degC\"");
        let e = parse_quantity("1e-7", Dimension::Current)
            .unwrap_err()
            .to_string();
        assert!(e.contains("\"100 nA\""), "{e}");
        let e = quantity_from_toml(&toml::Value::Integer(5), Dimension::Voltage).unwrap_err();
        assert!(e.to_string().contains("5 has no unit"), "{e}");
        assert_relative_eq!(ok("0.5", Dimension::Dimensionless), 0.5);
        assert_relative_eq!(
            quantity_from_toml(&toml::Value::Integer(3), Dimension::Dimensionless).unwrap_or(0.0),
            3.0
        );
        // "27 degC" is the Celsius spelling: 300.15 K.
        assert_relative_eq!(
            ok("27 degC", Dimension::Temperature),
            300.15,
            max_relative = 1e-15
        );
    }

    #[test]
    fn toml_values() {
        let v: toml::Value =
            toml::from_str("a = 1e-8\nb = \"300 K\"\nc = \"10 nA\"\nd = true\ne = -1")
                .expect("valid TOML literal");
        let get = |k: &str| v.get(k).cloned().unwrap_or(toml::Value::Boolean(false));
        let e = quantity_from_toml(&get("a"), Dimension::Current).unwrap_err();
        assert!(e.to_string().contains("has no unit"), "{e}");
        assert_relative_eq!(
            quantity_from_toml(&get("b"), Dimension::Temperature).unwrap_or(f64::NAN),
            300.0,
            epsilon = 0.0,
            max_relative = 1e-12
        );
        assert_relative_eq!(
            quantity_from_toml(&get("c"), Dimension::Current).unwrap_or(f64::NAN),
            1e-8,
            epsilon = 0.0,
            max_relative = 1e-12
        );
        let e = quantity_from_toml(&get("d"), Dimension::Current).unwrap_err();
        assert!(e.to_string().contains("boolean is not a quantity"), "{e}");
        let e = quantity_from_toml(&get("e"), Dimension::Temperature).unwrap_err();
        assert!(e.to_string().contains("has no unit"), "{e}");
        let e = quantity_from_toml(&toml::Value::Float(f64::NAN), Dimension::Voltage).unwrap_err();
        assert!(e.to_string().contains("not finite"), "{e}");
    }

    #[test]
    fn base_units_and_round_trip_with_format() {
        assert_eq!(Dimension::VoltageLength.base_unit(), "V·m");
        assert_eq!(Dimension::Current.base_unit(), "A");
        // Every dimension's own example parses (first quoted form).
        for d in Dimension::ALL {
            let ex = d.example().split('"').nth(1).unwrap_or("");
            assert!(parse_quantity(ex, d).is_ok(), "{d:?}: {ex}");
        }
        // format_si output reads back.
        for (v, d) in [(1.5e-6, Dimension::Length), (10e-9, Dimension::Current)] {
            let t = format_si(v, d.base_unit(), 4);
            assert_relative_eq!(ok(&t, d), v, epsilon = 0.0, max_relative = 1e-12);
        }
    }

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

    proptest::proptest! {
        /// No panic on any user text (DEVELOPERS.md invariant 5), and any accepted value is finite.
        #[test]
        fn never_panics(text in "\\PC{0,24}", pick in 0usize..17) {
            let dim = Dimension::ALL[pick % Dimension::ALL.len()];
            if let Ok(v) = parse_quantity(&text, dim) {
                proptest::prop_assert!(v.is_finite());
            }
        }

        /// Number + prefix + unit round trip: value * prefix scale (BIPM SI brochure, 2019).
        #[test]
        fn prefixed_numbers(m in -1e3f64..1e3, p in 0usize..9) {
            let (pre, scale) = [("a", 1e-18), ("f", 1e-15), ("p", 1e-12), ("n", 1e-9), ("u", 1e-6),
                                ("m", 1e-3), ("", 1.0), ("k", 1e3), ("Meg", 1e6)][p];
            let v = parse_quantity(&format!("{m:e} {pre}A"), Dimension::Current);
            proptest::prop_assert!(v.is_ok());
            let v = v.unwrap_or(f64::NAN);
            proptest::prop_assert!((v - m * scale).abs() <= 1e-12 * (m * scale).abs());
        }
    }
}
