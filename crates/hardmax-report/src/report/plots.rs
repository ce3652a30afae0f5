//! SVG figures drawn with plotters (SVG backend only: no bitmap backend, no system fonts; text is
//! left to the viewer's generic `sans-serif` family).
//!
//! Every function takes in-memory data and returns the SVG document as a `String`; none of them
//! touches the file system (the render step writes the files).
//!
//! Axes: tick positions are computed here (nice 1-2-2.5-5 steps on linear axes, 1-2-5 per decade
//! on log axes) and tick labels are written with SI prefixes ([`crate::units::format_si`]) or in
//! per cent for shares. A parameter axis is logarithmic when its values are all positive and span
//! at least two decades, step by a constant ratio (a geometric sweep), or when the experiment
//! asked for a log scale ([`use_log_axis`]).

use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint, Ranged};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::error::ReportError;
use super::folder::{Scale, TransferCurve};
use super::format::{fmt_plain, fmt_quantity};

const FONT: &str = "sans-serif";
const WIDTH: u32 = 820;
const HEIGHT: u32 = 440;
const LEGEND_WIDTH: u32 = 200;

/// Our palette (colour-blind-friendly hues, chosen for this report).
const PALETTE: [RGBColor; 8] = [
    RGBColor(27, 111, 122), // deep teal
    RGBColor(201, 122, 30), // amber
    RGBColor(122, 59, 105), // plum
    RGBColor(59, 79, 143),  // slate blue
    RGBColor(107, 122, 27), // olive
    RGBColor(164, 69, 44),  // rust
    RGBColor(46, 139, 87),  // sea green
    RGBColor(90, 90, 90),   // graphite
];
const INK: RGBColor = RGBColor(34, 40, 49);
const GRID: RGBColor = RGBColor(214, 219, 226);
const TARGET: RGBColor = RGBColor(196, 40, 60);
const IDEAL: RGBColor = RGBColor(20, 20, 20);
const BASELINE: RGBColor = RGBColor(110, 110, 110);

fn color(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

/// A swept parameter as an axis: its name (the parameter path), SI unit, and scale.
#[derive(Debug, Clone, PartialEq)]
pub struct ParamAxis {
    pub label: String,
    /// SI base unit ("A", "V", "m", "K"; empty when dimensionless).
    pub unit: String,
    pub log: bool,
}

/// Whether a parameter axis should be logarithmic: every value positive and either the
/// experiment asked for a log scale or the values span at least two decades.
pub fn use_log_axis(values: &[f64], scale: Option<Scale>) -> bool {
    let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if finite.is_empty() || finite.iter().any(|v| *v <= 0.0) {
        return false;
    }
    if scale == Some(Scale::Log) || is_geometric(&finite) {
        return true;
    }
    let (lo, hi) = min_max(&finite).unwrap_or((1.0, 1.0));
    spans_two_decades(lo, hi)
}

/// Whether positive values, once sorted and without repeats, are at least three and step by one
/// constant ratio (a geometric sweep given as a list, e.g. 1, 2, 4, 8 µm): such a sweep is
/// evenly spaced on a log axis.
fn is_geometric(values: &[f64]) -> bool {
    let mut v: Vec<f64> = values.to_vec();
    v.sort_by(f64::total_cmp);
    v.dedup_by(|a, b| (*a - *b).abs() <= 1e-12 * b.abs());
    if v.len() < 3 {
        return false;
    }
    let r0 = v[1] / v[0];
    r0 > 1.0 + 1e-9
        && v.windows(2)
            .all(|w| ((w[1] / w[0]) / r0 - 1.0).abs() < 1e-6)
}

/// Whether [lo, hi] (both > 0) spans at least two decades (with a little float slack, so that
/// 1e-9..1e-7 counts).
fn spans_two_decades(lo: f64, hi: f64) -> bool {
    hi.log10() - lo.log10() >= 2.0 - 1e-9
}

/// One point of an accuracy curve: population mean and its 5 %/95 % percentiles.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AccuracyPoint {
    pub x: f64,
    pub mean: f64,
    pub p05: Option<f64>,
    pub p95: Option<f64>,
    /// Ideal argmax accuracy at this point (dashed reference).
    pub ideal: Option<f64>,
    /// linfa float baseline at this point (dotted reference).
    pub baseline: Option<f64>,
    /// Accuracy target at this point (red reference).
    pub target: Option<f64>,
}

/// One curve (e.g. one value of the other swept parameter).
#[derive(Debug, Clone, PartialEq)]
pub struct AccuracyCurve {
    /// Legend text; empty for a single curve.
    pub label: String,
    pub points: Vec<AccuracyPoint>,
}

/// Accuracy versus one swept parameter. Each reference (ideal argmax, baseline, target) is drawn
/// as one line across the plot when it has the same value at every point, else as one line per
/// curve in the curve's colour.
#[derive(Debug, Clone, PartialEq)]
pub struct AccuracyPlot {
    pub title: String,
    pub axis: ParamAxis,
    pub curves: Vec<AccuracyCurve>,
}

/// One point of a yield curve with its Wilson score interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct YieldPoint {
    pub x: f64,
    pub yield_frac: f64,
    pub lo: Option<f64>,
    pub hi: Option<f64>,
}

/// One yield curve.
#[derive(Debug, Clone, PartialEq)]
pub struct YieldCurve {
    pub label: String,
    pub points: Vec<YieldPoint>,
}

/// Yield versus one swept parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct YieldPlot {
    pub title: String,
    pub axis: ParamAxis,
    pub curves: Vec<YieldCurve>,
}

/// Per-chip accuracies at one sweep point.
#[derive(Debug, Clone, PartialEq)]
pub struct AccuracyHistogram {
    pub title: String,
    /// How many chips have each accuracy (shares in [0, 1]; counts, so the figure of a
    /// million dies takes no more memory than that of a hundred).
    pub accuracies: crate::stats::ValueCounts,
    /// Test samples per chip; when at most 100, bins are one decision wide (1/samples).
    pub samples: Option<u64>,
    pub target: Option<f64>,
    pub ideal: Option<f64>,
}

/// Decision counts summed over the chips of one sweep point.
#[derive(Debug, Clone, PartialEq)]
pub struct ConfusionMatrix {
    pub title: String,
    pub classes: Vec<String>,
    /// `counts[true][predicted]`, predicted = class 0..N-1, then ambiguous, then non-converged.
    pub counts: Vec<Vec<u64>>,
}

impl ConfusionMatrix {
    /// An all-zero matrix for `classes`.
    pub fn zeros(title: &str, classes: Vec<String>) -> Self {
        let n = classes.len();
        Self {
            title: title.to_string(),
            classes,
            counts: vec![vec![0; n + 2]; n],
        }
    }
}

/// A competition-stage transfer curve and how to label its x axis.
#[derive(Debug, Clone, PartialEq)]
pub struct TransferPlot<'a> {
    pub title: String,
    pub curve: &'a TransferCurve,
    pub x_label: String,
    /// SI unit of x ("" if dimensionless).
    pub x_unit: String,
}

/// Mean decision times of the chips of one sweep point (seconds), binned as they are added:
/// give the smallest and largest time first ([`DecisionTimeHistogram::new`]), then every time
/// ([`DecisionTimeHistogram::add`]), so memory does not grow with the number of chips.
#[derive(Debug, Clone, PartialEq)]
pub struct DecisionTimeHistogram {
    pub title: String,
    /// Smallest and largest finite, positive time (the axis).
    pub min_s: f64,
    pub max_s: f64,
    /// Chips counted per bin (bins of [`time_bins`]).
    pub counts: Vec<u64>,
    /// Times counted.
    pub n: u64,
}

impl DecisionTimeHistogram {
    /// An empty histogram whose axis spans `[min_s, max_s]` (finite, positive; else a default
    /// axis).
    pub fn new(title: String, min_s: f64, max_s: f64) -> Self {
        let (min_s, max_s) =
            if min_s.is_finite() && max_s.is_finite() && 0.0 < min_s && min_s <= max_s {
                (min_s, max_s)
            } else {
                (1e-6, 1e-5)
            };
        Self {
            title,
            min_s,
            max_s,
            counts: vec![0; TIME_BINS],
            n: 0,
        }
    }

    /// Count one chip's time (non-finite or non-positive times are left out, as before).
    pub fn add(&mut self, t: f64) {
        if !(t.is_finite() && t > 0.0) {
            return;
        }
        let (x, lo, width) = time_bins(self.min_s, self.max_s);
        let k = ((x.fwd(t) - lo) / width).floor();
        let k = if k < 0.0 {
            0
        } else {
            (k as usize).min(TIME_BINS - 1)
        };
        self.counts[k] += 1;
        self.n += 1;
    }

    /// The histogram of `times` (all in memory; the axis from their range).
    pub fn of(title: String, times: &[f64]) -> Self {
        let vals: Vec<f64> = times
            .iter()
            .copied()
            .filter(|v| v.is_finite() && *v > 0.0)
            .collect();
        let (mn, mx) = min_max(&vals).unwrap_or((1e-6, 1e-5));
        let mut h = Self::new(title, mn, mx);
        for &t in &vals {
            h.add(t);
        }
        h
    }
}

/// Bins of the decision-time histogram.
const TIME_BINS: usize = 20;

/// The decision-time axis over `[mn, max]` (logarithmic when the times span two decades) and
/// its bins in plotted space: first edge and width ([`TIME_BINS`] bins; the last one closed).
fn time_bins(mn: f64, mx: f64) -> (AxisMap, f64, f64) {
    let log = spans_two_decades(mn, mx);
    let x = if log {
        AxisMap::logarithmic(mn, mx, 0.05, Labels::Quantity("s".into()))
    } else {
        AxisMap::linear(mn, mx, 0.08, Labels::Quantity("s".into()))
    };
    let (a, b) = (x.fwd(mn), x.fwd(mx));
    let width = if b > a {
        (b - a) / TIME_BINS as f64
    } else {
        (x.hi - x.lo) / TIME_BINS as f64
    };
    let lo = if b > a { a } else { x.lo };
    (x, lo, width)
}

// ---------------------------------------------------------------------------------------------
// Axes

#[derive(Debug, Clone, PartialEq)]
enum Labels {
    Quantity(String),
    Percent,
    Count,
}

/// An axis in plotted space (log10 of the value on log axes) with its ticks.
#[derive(Debug, Clone)]
struct AxisMap {
    log: bool,
    lo: f64,
    hi: f64,
    ticks: Vec<f64>,
    minor: Vec<f64>,
    labels: Labels,
    step: f64,
}

impl AxisMap {
    fn fwd(&self, v: f64) -> f64 {
        if self.log {
            v.log10()
        } else {
            v
        }
    }

    fn label(&self, t: f64) -> String {
        let v = if self.log { 10f64.powf(t) } else { t };
        match &self.labels {
            Labels::Quantity(unit) => {
                // Enough significant digits to tell neighbouring ticks apart (1.125 µA on a
                // 25 nA step), at least 3.
                let digits = match resolution_exp(self.step) {
                    Some(k) if v != 0.0 && !self.log => {
                        (snap(v).abs().log10().floor() as i32 - k + 1).clamp(3, 9) as usize
                    }
                    _ => 3,
                };
                fmt_quantity(snap(v), unit, digits)
            }
            Labels::Percent => {
                // As many decimals as the step needs: a 2.5 % step labels 87.5 %, not "88 %".
                let decimals =
                    resolution_exp(self.step * 100.0).map_or(0, |k| (-k).clamp(0, 4) as usize);
                format!("{:.*} %", decimals, v * 100.0)
            }
            Labels::Count => fmt_plain(snap(v), 6),
        }
    }

    /// Linear axis over [lo, hi] (data space), padded by `pad` of the span.
    fn linear(lo: f64, hi: f64, pad: f64, labels: Labels) -> Self {
        let flat = hi - lo <= f64::EPSILON * hi.abs().max(lo.abs()).max(1e-300);
        let flat_d = if lo == 0.0 { 1.0 } else { lo.abs() * 0.1 };
        let (lo, hi) = widen(lo, hi, flat, flat_d, pad);
        let (ticks, step) = nice_ticks(lo, hi, 6);
        Self {
            log: false,
            lo,
            hi,
            ticks,
            minor: Vec::new(),
            labels,
            step,
        }
    }

    /// Log axis over [lo, hi] (data space, both > 0), padded by `pad` of the span in decades.
    fn logarithmic(lo: f64, hi: f64, pad: f64, labels: Labels) -> Self {
        let (a, b) = (lo.log10(), hi.log10());
        let (a, b) = widen(a, b, b - a < 1e-9, 0.5, pad);
        let (ticks, minor) = log_ticks(a, b);
        Self {
            log: true,
            lo: a,
            hi: b,
            ticks,
            minor,
            labels,
            step: 0.0,
        }
    }

    /// Whether a data value can be placed on this axis (finite, and > 0 on a log axis).
    fn usable(&self, v: f64) -> bool {
        v.is_finite() && (!self.log || v > 0.0)
    }

    fn coord(&self) -> TickedCoord {
        TickedCoord {
            lo: self.lo,
            hi: self.hi,
            ticks: self.ticks.clone(),
            minor: self.minor.clone(),
        }
    }
}

/// [lo, hi] widened on both sides: by `flat_d` when the range is `flat` (a single value), else
/// by `pad` of its span.
fn widen(lo: f64, hi: f64, flat: bool, flat_d: f64, pad: f64) -> (f64, f64) {
    let d = if flat { flat_d } else { (hi - lo) * pad };
    (lo - d, hi + d)
}

/// A linear plotters coordinate over [lo, hi] whose key points are our own ticks (bold lines
/// and labels) and minor ticks (light lines).
#[derive(Debug, Clone)]
struct TickedCoord {
    lo: f64,
    hi: f64,
    ticks: Vec<f64>,
    minor: Vec<f64>,
}

impl Ranged for TickedCoord {
    type ValueType = f64;
    type FormatOption = DefaultFormatting;

    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        let span = self.hi - self.lo;
        if !(span.is_finite() && span > 0.0 && v.is_finite()) {
            return (limit.0 + limit.1) / 2;
        }
        let t = (v - self.lo) / span;
        let px = limit.0 as f64 + t * (limit.1 - limit.0) as f64;
        px.clamp(-1.0e6, 1.0e6).round() as i32
    }

    fn key_points<H: KeyPointHint>(&self, hint: H) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            self.minor.clone()
        } else {
            self.ticks.clone()
        }
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.lo..self.hi
    }
}

/// Round away binary noise from tick values (0.30000000000000004 -> 0.3).
/// The decimal exponent k of the finest digit a tick step needs: the largest k with `step`
/// an integer multiple of 10^k (2.5 -> -1, 0.2 -> -1, 50 -> 1). None for a zero or
/// non-finite step (log axes).
fn resolution_exp(step: f64) -> Option<i32> {
    if !(step.is_finite() && step > 0.0) {
        return None;
    }
    let mut k = step.log10().floor() as i32;
    for _ in 0..6 {
        let m = step / 10f64.powi(k);
        if (m - m.round()).abs() <= 1e-6 * m {
            return Some(k);
        }
        k -= 1;
    }
    Some(k)
}

fn snap(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let mag = v.abs().log10().floor() as i32;
    let scale = 10f64.powi(9 - mag);
    (v * scale).round() / scale
}

/// Ticks at multiples of a nice step (1, 2, 2.5, 5 × 10^k) inside [lo, hi]; built from an
/// integer index, not by adding floats.
fn nice_ticks(lo: f64, hi: f64, target: usize) -> (Vec<f64>, f64) {
    let span = hi - lo;
    if !(span.is_finite() && span > 0.0) {
        return (vec![lo], 0.0);
    }
    let raw = span / target.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw * (1.0 - 1e-9))
        .unwrap_or(10.0 * mag);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    let ticks = (first..=last.min(first + 100))
        .map(|k| snap(k as f64 * step))
        .collect();
    (ticks, step)
}

/// Log-axis ticks (in log10 space) for [a, b]: 1-2-5 per decade when the span is short,
/// decades only when it is long; light lines at every integer mantissa.
fn log_ticks(a: f64, b: f64) -> (Vec<f64>, Vec<f64>) {
    let span = b - a;
    let mantissas: &[f64] = if span < 1.0 {
        &[1.0, 1.5, 2.0, 3.0, 5.0, 7.0]
    } else if span <= 2.6 {
        &[1.0, 2.0, 5.0]
    } else {
        &[1.0]
    };
    let d0 = a.floor() as i64;
    let d1 = (b.ceil() as i64).min(d0 + 60);
    let mut ticks = Vec::new();
    let mut minor = Vec::new();
    for d in d0..=d1 {
        for m in 1..=9 {
            let t = d as f64 + (m as f64).log10();
            if t >= a && t <= b {
                if mantissas.contains(&(m as f64)) {
                    ticks.push(t);
                } else if span <= 6.0 {
                    minor.push(t);
                }
            }
        }
        if mantissas.contains(&1.5) {
            let t = d as f64 + 1.5f64.log10();
            if t >= a && t <= b {
                ticks.push(t);
            }
        }
    }
    ticks.sort_by(f64::total_cmp);
    (ticks, minor)
}

fn min_max(v: &[f64]) -> Option<(f64, f64)> {
    let mut it = v.iter().copied().filter(|x| x.is_finite());
    let first = it.next()?;
    Some(it.fold((first, first), |(lo, hi), x| (lo.min(x), hi.max(x))))
}

fn param_axis(axis: &ParamAxis, xs: &[f64]) -> AxisMap {
    let (lo, hi) = min_max(xs).unwrap_or((0.0, 1.0));
    let labels = Labels::Quantity(axis.unit.clone());
    if axis.log && lo > 0.0 {
        AxisMap::logarithmic(lo, hi, 0.05, labels)
    } else {
        let mut a = AxisMap::linear(lo, hi, 0.05, labels);
        // Whole-number parameters (bits, counts) get whole-number ticks when enough remain.
        if !xs.is_empty() && xs.iter().all(|v| v.fract() == 0.0) {
            let whole: Vec<f64> = a
                .ticks
                .iter()
                .copied()
                .filter(|t| t.fract() == 0.0)
                .collect();
            if whole.len() >= 2 {
                a.ticks = whole;
            }
        }
        a
    }
}

/// The parameter axis of a plot over all points of its curves (`x_of` gives a point's value).
fn curves_axis<'a, P: 'a>(
    axis: &ParamAxis,
    points: impl Iterator<Item = &'a P>,
    x_of: impl Fn(&P) -> f64,
) -> AxisMap {
    let xs: Vec<f64> = points.map(x_of).collect();
    param_axis(axis, &xs)
}

/// A y axis for shares: from a little below the lowest value to just above the highest,
/// clipped to [0, 1] with a small margin so lines at 100 % stay visible.
fn share_axis(values: &[f64]) -> AxisMap {
    let (lo, hi) = min_max(values).unwrap_or((0.0, 1.0));
    let lo = (lo - 0.03).max(0.0);
    let hi = (hi + 0.02).min(1.0);
    let lo = if hi - lo < 0.05 {
        (hi - 0.05).max(0.0)
    } else {
        lo
    };
    let mut a = AxisMap::linear(lo, hi, 0.0, Labels::Percent);
    a.hi = (hi + 0.012).min(1.012);
    a.lo = (lo - 0.005).max(-0.012);
    a.ticks.retain(|t| (-1e-9..=1.0 + 1e-9).contains(t));
    a
}

/// A y axis with ticks for shares over all of [0, 1], shown from `lo` to `hi`.
fn full_share_axis(lo: f64, hi: f64) -> AxisMap {
    let mut a = AxisMap::linear(0.0, 1.0, 0.0, Labels::Percent);
    a.lo = lo;
    a.hi = hi;
    a
}

/// A y axis for histogram counts: from 0 to a little above the largest count, whole-number
/// ticks only.
fn count_axis(counts: &[u64]) -> AxisMap {
    let cmax = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
    let mut a = AxisMap::linear(0.0, cmax * 1.08, 0.0, Labels::Count);
    a.lo = 0.0;
    a.ticks.retain(|t| t.fract() == 0.0);
    a
}

/// Label of a parameter axis: "path (unit)".
fn axis_title(label: &str, unit: &str) -> String {
    if unit.is_empty() {
        label.to_string()
    } else {
        format!("{label} ({unit})")
    }
}

// ---------------------------------------------------------------------------------------------
// Drawing helpers

type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<TickedCoord, TickedCoord>>;
type Area<'b> = DrawingArea<SVGBackend<'b>, Shift>;

fn perr<E: std::fmt::Display>(plot: &str) -> impl Fn(E) -> ReportError + '_ {
    move |e| ReportError::Plot {
        plot: plot.to_string(),
        message: e.to_string(),
    }
}

/// Line style of a reference line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Dash {
    Solid,
    Dashed,
    Dotted,
}

impl Dash {
    /// (dash, gap) in pixels; `None` = solid.
    fn pattern(self) -> Option<(i32, i32)> {
        match self {
            Dash::Solid => None,
            Dash::Dashed => Some((7, 4)),
            Dash::Dotted => Some((2, 3)),
        }
    }

    fn width(self) -> u32 {
        match self {
            Dash::Dashed => 1,
            _ => 2,
        }
    }
}

fn draw_styled(
    chart: &mut Chart,
    pts: Vec<(f64, f64)>,
    col: RGBColor,
    dash: Dash,
) -> Result<(), String> {
    let style = col.stroke_width(dash.width());
    match dash.pattern() {
        Some((on, off)) => chart
            .draw_series(std::iter::once(DashedPathElement::new(pts, on, off, style)))
            .map(|_| ()),
        None => chart.draw_series(LineSeries::new(pts, style)).map(|_| ()),
    }
    .map_err(|e| e.to_string())
}

/// A legend entry drawn beside the chart.
enum Key {
    Line(RGBColor, u32, Dash),
    Band(RGBColor),
    Marker(RGBColor),
    Bar(RGBColor),
}

fn draw_legend(area: &Area, entries: &[(Key, String)]) -> Result<(), String> {
    let style = TextStyle::from((FONT, 13).into_font())
        .color(&INK)
        .pos(Pos::new(HPos::Left, VPos::Center));
    let mut y = 56;
    for (key, text) in entries {
        let (x0, x1) = (8, 40);
        match key {
            Key::Line(c, w, dash) => match dash.pattern() {
                Some((on, off)) => area.draw(&DashedPathElement::new(
                    vec![(x0, y), (x1, y)],
                    on,
                    off,
                    c.stroke_width(*w),
                )),
                None => area.draw(&PathElement::new(
                    vec![(x0, y), (x1, y)],
                    c.stroke_width(*w),
                )),
            },
            Key::Band(c) => area.draw(&Rectangle::new(
                [(x0, y - 6), (x1, y + 6)],
                c.mix(0.22).filled(),
            )),
            Key::Marker(c) => area.draw(&Circle::new(((x0 + x1) / 2, y), 4, c.filled())),
            Key::Bar(c) => area.draw(&Rectangle::new(
                [(x0 + 8, y - 7), (x1 - 8, y + 7)],
                c.mix(0.75).filled(),
            )),
        }
        .map_err(|e| e.to_string())?;
        let shown: String = if text.chars().count() > 24 {
            text.chars().take(23).chain(std::iter::once('…')).collect()
        } else {
            text.clone()
        };
        area.draw(&Text::new(shown, (x1 + 8, y), style.clone()))
            .map_err(|e| e.to_string())?;
        y += 22;
    }
    Ok(())
}

/// Set up a chart with our axes, mesh and labels on `area`.
fn build_chart<'a, 'b>(
    area: &'a Area<'b>,
    title: &str,
    x: &'a AxisMap,
    y: &'a AxisMap,
    x_desc: &str,
    y_desc: &str,
) -> Result<Chart<'a, 'b>, String> {
    let mut chart = ChartBuilder::on(area)
        .caption(title, (FONT, 17).into_font().color(&INK))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(70)
        .build_cartesian_2d(x.coord(), y.coord())
        .map_err(|e| e.to_string())?;
    let xf = |v: &f64| x.label(*v);
    let yf = |v: &f64| y.label(*v);
    chart
        .configure_mesh()
        .x_desc(x_desc)
        .y_desc(y_desc)
        .x_label_formatter(&xf)
        .y_label_formatter(&yf)
        .axis_desc_style((FONT, 14).into_font().color(&INK))
        .label_style((FONT, 12).into_font().color(&INK))
        .bold_line_style(GRID.stroke_width(1))
        .light_line_style(GRID.mix(0.45).stroke_width(1))
        .axis_style(INK.stroke_width(1))
        .draw()
        .map_err(|e| e.to_string())?;
    Ok(chart)
}

/// A reference line over the x range: horizontal if every value is the same, else a polyline.
fn reference_points(refs: &[(f64, f64)], x: &AxisMap) -> Vec<(f64, f64)> {
    let pts: Vec<(f64, f64)> = refs
        .iter()
        .filter(|(a, b)| x.usable(*a) && b.is_finite())
        .map(|(a, b)| (x.fwd(*a), *b))
        .collect();
    let Some(first) = pts.first() else {
        return pts;
    };
    if pts.iter().all(|p| (p.1 - first.1).abs() < 1e-12) || pts.len() == 1 {
        vec![(x.lo, first.1), (x.hi, first.1)]
    } else {
        let mut pts = pts;
        pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        pts
    }
}

fn finish(root: Area) -> Result<(), String> {
    root.present().map_err(|e| e.to_string())
}

/// Draw one figure into a fresh SVG string; a drawing error names the figure.
fn render_svg(
    name: &str,
    draw: impl FnOnce(&mut String) -> Result<(), String>,
) -> Result<String, ReportError> {
    let mut buf = String::new();
    draw(&mut buf).map_err(perr(name))?;
    Ok(buf)
}

/// The common frame of a chart figure: white page, chart with our axes on the left, legend on
/// the right. `draw` plots the series and collects the legend entries, drawn after it.
fn framed_chart(
    buf: &mut String,
    title: &str,
    x: &AxisMap,
    y: &AxisMap,
    x_desc: &str,
    y_desc: &str,
    draw: impl FnOnce(&mut Chart, &mut Vec<(Key, String)>) -> Result<(), String>,
) -> Result<(), String> {
    let root = SVGBackend::with_string(buf, (WIDTH, HEIGHT)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let (left, legend) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
    let mut chart = build_chart(&left, title, x, y, x_desc, y_desc)?;
    let mut keys = Vec::new();
    draw(&mut chart, &mut keys)?;
    draw_legend(&legend, &keys)?;
    finish(root)
}

/// A filled circle of `size` pixels at every point.
fn draw_markers(
    chart: &mut Chart,
    pts: &[(f64, f64)],
    size: i32,
    col: RGBColor,
) -> Result<(), String> {
    chart
        .draw_series(pts.iter().map(|&p| Circle::new(p, size, col.filled())))
        .map(|_| ())
        .map_err(|e| e.to_string())
}

/// Legend text of a curve: its label, or `single` when the plot has one unlabelled curve.
fn curve_label(label: &str, single: &str) -> String {
    if label.is_empty() {
        single.to_string()
    } else {
        label.to_string()
    }
}

/// Histogram bars: bin `k` covers [lo + k width, lo + (k + 1) width); `edges` gives a bar's
/// left and right edge from the bin's left edge. Empty bins are not drawn.
fn draw_bars(
    chart: &mut Chart,
    counts: &[u64],
    lo: f64,
    width: f64,
    col: RGBColor,
    edges: impl Fn(f64) -> (f64, f64),
) -> Result<(), String> {
    chart
        .draw_series(
            counts
                .iter()
                .enumerate()
                .filter(|(_, c)| **c > 0)
                .map(|(k, c)| {
                    let (a, b) = edges(lo + width * k as f64);
                    Rectangle::new([(a, 0.0), (b, *c as f64)], col.mix(0.75).filled())
                }),
        )
        .map(|_| ())
        .map_err(|e| e.to_string())
}

// ---------------------------------------------------------------------------------------------
// Figures

/// Accuracy versus a swept parameter: population mean per curve with its 5–95 % band, ideal
/// argmax (dashed), linfa baseline (dotted) and the target (red).
pub fn accuracy_vs_param(plot: &AccuracyPlot) -> Result<String, ReportError> {
    let name = format!("accuracy vs {}", plot.axis.label);
    render_svg(&name, |buf| draw_accuracy(plot, buf))
}

fn draw_accuracy(plot: &AccuracyPlot, buf: &mut String) -> Result<(), String> {
    let x = curves_axis(
        &plot.axis,
        plot.curves.iter().flat_map(|c| &c.points),
        |p| p.x,
    );
    let mut ys: Vec<f64> = Vec::new();
    for c in &plot.curves {
        for p in &c.points {
            ys.push(p.mean);
            ys.extend(p.p05);
            ys.extend(p.p95);
            ys.extend(p.ideal);
            ys.extend(p.baseline);
            ys.extend(p.target);
        }
    }
    let y = share_axis(&ys);

    framed_chart(
        buf,
        &plot.title,
        &x,
        &y,
        &axis_title(&plot.axis.label, &plot.axis.unit),
        "test accuracy",
        |chart, keys| {
            for (i, c) in plot.curves.iter().enumerate() {
                let col = color(i);
                let mut pts: Vec<AccuracyPoint> =
                    c.points.iter().copied().filter(|p| x.usable(p.x)).collect();
                pts.sort_by(|a, b| a.x.total_cmp(&b.x));
                let band: Vec<(f64, f64, f64)> = pts
                    .iter()
                    .filter_map(|p| Some((x.fwd(p.x), p.p05?, p.p95?)))
                    .collect();
                if band.len() >= 2 {
                    let poly: Vec<(f64, f64)> = band
                        .iter()
                        .map(|b| (b.0, b.2))
                        .chain(band.iter().rev().map(|b| (b.0, b.1)))
                        .collect();
                    chart
                        .draw_series(std::iter::once(Polygon::new(poly, col.mix(0.18).filled())))
                        .map_err(|e| e.to_string())?;
                } else {
                    for b in &band {
                        chart
                            .draw_series(std::iter::once(PathElement::new(
                                vec![(b.0, b.1), (b.0, b.2)],
                                col.mix(0.5).stroke_width(6),
                            )))
                            .map_err(|e| e.to_string())?;
                    }
                }
                let line: Vec<(f64, f64)> = pts.iter().map(|p| (x.fwd(p.x), p.mean)).collect();
                chart
                    .draw_series(LineSeries::new(line.clone(), col.stroke_width(2)))
                    .map_err(|e| e.to_string())?;
                draw_markers(chart, &line, 3, col)?;
                keys.push((
                    Key::Line(col, 2, Dash::Solid),
                    curve_label(&c.label, "mean over chips"),
                ));
            }
            if plot
                .curves
                .iter()
                .any(|c| c.points.iter().any(|p| p.p05.is_some()))
            {
                keys.push((Key::Band(color(0)), "5–95 % of chips".to_string()));
            }
            type Pick = fn(&AccuracyPoint) -> Option<f64>;
            // Ideal and baseline equal at every point: one line would hide the other, so draw
            // one and say in the legend that they are equal.
            let equal_refs = {
                let pairs: Vec<(f64, f64)> = plot
                    .curves
                    .iter()
                    .flat_map(|c| {
                        c.points
                            .iter()
                            .filter_map(|p| Some((p.ideal?, p.baseline?)))
                    })
                    .collect();
                !pairs.is_empty() && pairs.iter().all(|(a, b)| (a - b).abs() < 1e-12)
            };
            let ideal_name = if equal_refs {
                "ideal = baseline (equal)"
            } else {
                "ideal argmax"
            };
            let refs: [(Pick, RGBColor, Dash, &str); 3] = [
                (|p| p.ideal, IDEAL, Dash::Dashed, ideal_name),
                (|p| p.baseline, BASELINE, Dash::Dotted, "linfa baseline"),
                (|p| p.target, TARGET, Dash::Solid, "target"),
            ];
            for (pick, col, dash, name) in refs {
                if equal_refs && name == "linfa baseline" {
                    continue;
                }
                let all: Vec<f64> = plot
                    .curves
                    .iter()
                    .flat_map(|c| c.points.iter().filter_map(pick))
                    .collect();
                let Some(first) = all.first().copied() else {
                    continue;
                };
                let lines: Vec<(RGBColor, Vec<(f64, f64)>)> =
                    if all.iter().all(|v| (v - first).abs() < 1e-12) {
                        vec![(col, vec![(x.lo, first), (x.hi, first)])]
                    } else {
                        plot.curves
                            .iter()
                            .enumerate()
                            .map(|(i, c)| {
                                let pts: Vec<(f64, f64)> = c
                                    .points
                                    .iter()
                                    .filter(|p| x.usable(p.x))
                                    .filter_map(|p| Some((p.x, pick(p)?)))
                                    .collect();
                                (
                                    if name == "target" { TARGET } else { color(i) },
                                    reference_points(&pts, &x),
                                )
                            })
                            .collect()
                    };
                // Curves that share the same reference line (e.g. ideal argmax depends only on the
                // x parameter) get it drawn once, in the reference colour.
                let same = lines.windows(2).all(|w| match w {
                    [a, b] => {
                        a.1.len() == b.1.len()
                            && a.1.iter().zip(&b.1).all(|(p, q)| {
                                (p.0 - q.0).abs() < 1e-12 && (p.1 - q.1).abs() < 1e-12
                            })
                    }
                    _ => true,
                });
                let lines = if same {
                    lines
                        .into_iter()
                        .take(1)
                        .map(|(_, pts)| (col, pts))
                        .collect()
                } else {
                    lines
                };
                for (c, pts) in &lines {
                    draw_styled(chart, pts.clone(), *c, dash)?;
                }
                let label = if lines.len() > 1 && name != "target" {
                    format!("{name} (per curve)")
                } else {
                    name.to_string()
                };
                keys.push((Key::Line(col, dash.width(), dash), label));
            }
            Ok(())
        },
    )
}

/// Yield versus a swept parameter, with Wilson score interval error bars.
pub fn yield_vs_param(plot: &YieldPlot) -> Result<String, ReportError> {
    let name = format!("yield vs {}", plot.axis.label);
    render_svg(&name, |buf| draw_yield(plot, buf))
}

fn draw_yield(plot: &YieldPlot, buf: &mut String) -> Result<(), String> {
    let x = curves_axis(
        &plot.axis,
        plot.curves.iter().flat_map(|c| &c.points),
        |p| p.x,
    );
    let y = full_share_axis(-0.03, 1.03);
    framed_chart(
        buf,
        &plot.title,
        &x,
        &y,
        &axis_title(&plot.axis.label, &plot.axis.unit),
        "yield (chips meeting target)",
        |chart, keys| {
            // Offset curves a little sideways (in pixels, via the x span) so error bars do not
            // overlap.
            let n = plot.curves.len().max(1) as f64;
            let dx = (x.hi - x.lo) * 0.008;
            for (i, c) in plot.curves.iter().enumerate() {
                let col = color(i);
                let shift = (i as f64 - (n - 1.0) / 2.0) * dx;
                let mut pts: Vec<YieldPoint> =
                    c.points.iter().copied().filter(|p| x.usable(p.x)).collect();
                pts.sort_by(|a, b| a.x.total_cmp(&b.x));
                let line: Vec<(f64, f64)> = pts
                    .iter()
                    .map(|p| (x.fwd(p.x) + shift, p.yield_frac))
                    .collect();
                chart
                    .draw_series(LineSeries::new(line.clone(), col.mix(0.6).stroke_width(1)))
                    .map_err(|e| e.to_string())?;
                let cap = (x.hi - x.lo) * 0.006;
                for p in &pts {
                    if let (Some(lo), Some(hi)) = (p.lo, p.hi) {
                        let xv = x.fwd(p.x) + shift;
                        for seg in [
                            vec![(xv, lo), (xv, hi)],
                            vec![(xv - cap, lo), (xv + cap, lo)],
                            vec![(xv - cap, hi), (xv + cap, hi)],
                        ] {
                            chart
                                .draw_series(std::iter::once(PathElement::new(
                                    seg,
                                    col.stroke_width(2),
                                )))
                                .map_err(|e| e.to_string())?;
                        }
                    }
                }
                draw_markers(chart, &line, 4, col)?;
                keys.push((Key::Marker(col), curve_label(&c.label, "yield")));
            }
            keys.push((
                Key::Line(INK, 2, Dash::Solid),
                "Wilson interval".to_string(),
            ));
            Ok(())
        },
    )
}

/// Equal-width bins over [lo, hi): counts per bin (index from the value, clamped).
/// [`bin_counts`] of values given with their counts.
fn weighted_bin_counts(values: &[(f64, u64)], lo: f64, width: f64, nbins: usize) -> Vec<u64> {
    let mut counts = vec![0u64; nbins];
    for &(v, n) in values.iter().filter(|(v, _)| v.is_finite()) {
        let k = ((v - lo) / width).floor();
        let k = if k < 0.0 {
            0
        } else {
            (k as usize).min(nbins.saturating_sub(1))
        };
        if let Some(c) = counts.get_mut(k) {
            *c += n;
        }
    }
    counts
}

#[cfg(test)]
fn bin_counts(values: &[f64], lo: f64, width: f64, nbins: usize) -> Vec<u64> {
    let mut counts = vec![0u64; nbins];
    for v in values.iter().filter(|v| v.is_finite()) {
        let k = ((v - lo) / width).floor();
        let k = if k < 0.0 {
            0
        } else {
            (k as usize).min(nbins.saturating_sub(1))
        };
        if let Some(c) = counts.get_mut(k) {
            *c += 1;
        }
    }
    counts
}

/// Histogram of per-chip accuracies at one sweep point, with the target and ideal argmax marked.
pub fn accuracy_histogram(h: &AccuracyHistogram) -> Result<String, ReportError> {
    render_svg("per-chip accuracy histogram", |buf| draw_acc_hist(h, buf))
}

fn draw_acc_hist(h: &AccuracyHistogram, buf: &mut String) -> Result<(), String> {
    // The distinct finite accuracies with their counts, ascending.
    let vals: Vec<(f64, u64)> = h.accuracies.iter().filter(|(v, _)| v.is_finite()).collect();
    let n_vals: u64 = vals.iter().map(|&(_, c)| c).sum();
    let mn_mx = vals.first().zip(vals.last()).map(|(a, b)| (a.0, b.0));
    let (mn, mx) = mn_mx.unwrap_or((0.0, 1.0));
    // One bin per possible accuracy value k/samples when the test set is small, else 24 bins.
    let (lo, width, nbins) = match h.samples.filter(|n| (1..=100).contains(n)) {
        Some(n) => {
            let w = 1.0 / n as f64;
            let k0 = (mn / w).round() as i64;
            let k1 = (mx / w).round() as i64;
            let lo = (k0 as f64 - 0.5) * w;
            (lo, w, (k1 - k0 + 1).max(1) as usize)
        }
        None => {
            let span = (mx - mn).max(0.01);
            let w = span / 24.0;
            (mn - w / 2.0, w, 25)
        }
    };
    let counts = weighted_bin_counts(&vals, lo, width, nbins);
    let hi = lo + width * nbins as f64;
    let mut xr = vec![lo, hi];
    xr.extend(h.target);
    xr.extend(h.ideal);
    let (xlo, xhi) = min_max(&xr).unwrap_or((0.0, 1.0));
    let mut x = AxisMap::linear(xlo, xhi, 0.04, Labels::Percent);
    x.ticks.retain(|t| (-1e-9..=1.0 + 1e-9).contains(t));
    let y = count_axis(&counts);
    framed_chart(
        buf,
        &h.title,
        &x,
        &y,
        "test accuracy of one chip",
        "chips",
        |chart, keys| {
            let bar = color(0);
            let gap = width * 0.08;
            draw_bars(chart, &counts, lo, width, bar, |x0| {
                (x0 + gap, x0 + width - gap)
            })?;
            keys.push((Key::Bar(bar), format!("chips (n = {n_vals})")));
            let refs = [
                (h.target, TARGET, Dash::Solid, "target"),
                (h.ideal, IDEAL, Dash::Dashed, "ideal argmax"),
            ];
            for (value, col, dash, name) in refs {
                if let Some(t) = value {
                    draw_styled(chart, vec![(t, 0.0), (t, y.hi)], col, dash)?;
                    keys.push((Key::Line(col, dash.width(), dash), name.to_string()));
                }
            }
            Ok(())
        },
    )
}

/// Histogram of per-chip mean decision times (log-binned when they span two decades).
pub fn decision_time_histogram(h: &DecisionTimeHistogram) -> Result<String, ReportError> {
    render_svg("decision time histogram", |buf| draw_time_hist(h, buf))
}

fn draw_time_hist(h: &DecisionTimeHistogram, buf: &mut String) -> Result<(), String> {
    let (x, lo, width) = time_bins(h.min_s, h.max_s);
    let counts = h.counts.clone();
    let y = count_axis(&counts);
    framed_chart(
        buf,
        &h.title,
        &x,
        &y,
        "mean decision time of one chip (s)",
        "chips",
        |chart, keys| {
            let bar = color(3);
            draw_bars(chart, &counts, lo, width, bar, |x0| {
                (x0 + width * 0.06, x0 + width * 0.94)
            })?;
            keys.push((Key::Bar(bar), format!("chips (n = {})", h.n)));
            Ok(())
        },
    )
}

/// Competition-stage transfer curve: output share of every competitor versus the swept input.
pub fn transfer_curve(t: &TransferPlot) -> Result<String, ReportError> {
    render_svg("transfer curve", |buf| draw_transfer(t, buf))
}

fn draw_transfer(t: &TransferPlot, buf: &mut String) -> Result<(), String> {
    let log = use_log_axis(&t.curve.x, None);
    let axis = ParamAxis {
        label: t.x_label.clone(),
        unit: t.x_unit.clone(),
        log,
    };
    let x = param_axis(&axis, &t.curve.x);
    let y = full_share_axis(-0.02, 1.02);
    framed_chart(
        buf,
        &t.title,
        &x,
        &y,
        &axis_title(&t.x_label, &t.x_unit),
        "output share",
        |chart, keys| {
            for (k, shares) in t.curve.shares.iter().enumerate() {
                let col = color(k);
                let mut pts: Vec<(f64, f64)> = t
                    .curve
                    .x
                    .iter()
                    .zip(shares)
                    .filter(|(a, b)| x.usable(**a) && b.is_finite())
                    .map(|(a, b)| (x.fwd(*a), *b))
                    .collect();
                pts.sort_by(|a, b| a.0.total_cmp(&b.0));
                chart
                    .draw_series(LineSeries::new(pts, col.stroke_width(2)))
                    .map_err(|e| e.to_string())?;
                if k < 12 {
                    keys.push((Key::Line(col, 2, Dash::Solid), format!("output {k}")));
                }
            }
            if t.curve.shares.len() > 12 {
                keys.push((
                    Key::Line(GRID, 2, Dash::Solid),
                    format!("… {} outputs", t.curve.shares.len()),
                ));
            }
            Ok(())
        },
    )
}

/// Confusion matrix heatmap with counts: rows are true classes, columns the predicted class,
/// then "ambiguous" and "non-converged". Diagonal cells are shaded in teal, errors in rust,
/// ambiguous and non-converged decisions in plum; shade = share of the row.
pub fn confusion_heatmap(m: &ConfusionMatrix) -> Result<String, ReportError> {
    render_svg("confusion matrix", |buf| draw_confusion(m, buf))
}

fn shade(base: RGBColor, t: f64) -> RGBColor {
    let t = t.clamp(0.0, 1.0);
    let mix = |c: u8| (255.0 + (c as f64 - 255.0) * t).round() as u8;
    RGBColor(mix(base.0), mix(base.1), mix(base.2))
}

fn draw_confusion(m: &ConfusionMatrix, buf: &mut String) -> Result<(), String> {
    let n = m.classes.len();
    let ncols = n + 2;
    let top = 78i32;
    let cell_w = ((WIDTH as i32 - 200) / ncols.max(1) as i32).clamp(28, 100);
    let cell_h = ((HEIGHT as i32 - top - 60) / n.max(1) as i32).clamp(16, 44);
    let grid_w = cell_w * ncols as i32;
    let width = (grid_w + 200).max(WIDTH as i32) as u32;
    // Centre the grid, leaving room for the row labels on the left.
    let left = ((width as i32 - grid_w) / 2 + 40).max(160);
    let height = (top + cell_h * n as i32 + 60).max(240) as u32;
    let root = SVGBackend::with_string(buf, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let e = |r: Result<(), DrawingAreaErrorKind<_>>| r.map_err(|e| e.to_string());
    let centre = |size: i32| {
        TextStyle::from((FONT, size).into_font())
            .color(&INK)
            .pos(Pos::new(HPos::Center, VPos::Center))
    };
    e(root.draw(&Text::new(
        m.title.clone(),
        (width as i32 / 2, 20),
        centre(17),
    )))?;
    e(root.draw(&Text::new(
        "predicted class (decision)",
        (left + grid_w / 2, 44),
        centre(14),
    )))?;
    let font_cell = if cell_w < 40 { 10 } else { 12 };
    let short = |s: &str, max: usize| -> String {
        if s.chars().count() > max {
            s.chars()
                .take(max.saturating_sub(1))
                .chain(std::iter::once('…'))
                .collect()
        } else {
            s.to_string()
        }
    };
    let max_chars = ((cell_w as f64) / (font_cell as f64 * 0.6)).max(3.0) as usize;
    for c in 0..ncols {
        let label = match c {
            c if c < n => short(
                m.classes.get(c).map(String::as_str).unwrap_or("?"),
                max_chars,
            ),
            c if c == n => short("ambiguous", max_chars),
            _ => short("non-converged", max_chars),
        };
        let cx = left + cell_w * c as i32 + cell_w / 2;
        e(root.draw(&Text::new(label, (cx, top - 12), centre(font_cell))))?;
    }
    let row_style = TextStyle::from((FONT, 12).into_font())
        .color(&INK)
        .pos(Pos::new(HPos::Right, VPos::Center));
    e(root.draw(&Text::new(
        "true class",
        (left - 130, top + cell_h * n as i32 / 2),
        TextStyle::from((FONT, 14).into_font())
            .color(&INK)
            .pos(Pos::new(HPos::Center, VPos::Center))
            .transform(FontTransform::Rotate270),
    )))?;
    let teal = color(0);
    let rust = color(5);
    let plum = color(2);
    for (t, row) in m.counts.iter().enumerate().take(n) {
        let total: u64 = row.iter().sum();
        let y0 = top + cell_h * t as i32;
        e(root.draw(&Text::new(
            short(m.classes.get(t).map(String::as_str).unwrap_or("?"), 16),
            (left - 8, y0 + cell_h / 2),
            row_style.clone(),
        )))?;
        for c in 0..ncols {
            let count = row.get(c).copied().unwrap_or(0);
            let share = if total > 0 {
                count as f64 / total as f64
            } else {
                0.0
            };
            let base = if c == t {
                teal
            } else if c < n {
                rust
            } else {
                plum
            };
            // Lift non-zero cells a little so a single decision is visible.
            let fill = shade(base, if count > 0 { 0.08 + 0.92 * share } else { 0.0 });
            let x0 = left + cell_w * c as i32;
            e(root.draw(&Rectangle::new(
                [(x0, y0), (x0 + cell_w, y0 + cell_h)],
                fill.filled(),
            )))?;
            e(root.draw(&Rectangle::new(
                [(x0, y0), (x0 + cell_w, y0 + cell_h)],
                GRID.stroke_width(1),
            )))?;
            let ink = if share > 0.55 { WHITE } else { INK };
            e(root.draw(&Text::new(
                format!("{count}"),
                (x0 + cell_w / 2, y0 + cell_h / 2),
                TextStyle::from((FONT, font_cell).into_font())
                    .color(&ink)
                    .pos(Pos::new(HPos::Center, VPos::Center)),
            )))?;
        }
    }
    // Separator between class columns and the extra columns.
    let xs = left + cell_w * n as i32;
    e(root.draw(&PathElement::new(
        vec![(xs, top - 4), (xs, top + cell_h * n as i32 + 4)],
        INK.stroke_width(2),
    )))?;
    e(root.draw(&Text::new(
        "counts summed over all chips; shade = share of the row",
        (left + grid_w / 2, top + cell_h * n as i32 + 24),
        centre(12),
    )))?;
    finish(root)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Tick labels carry the digits their spacing needs: a 2.5 % step gives 87.5 %, not
    /// "88 %" (two ticks would otherwise read alike or wrong); a 25 nA step on 1 µA gives
    /// 1.025 µA.
    #[test]
    fn tick_labels_have_the_digits_of_their_step() {
        let a = AxisMap::linear(0.8, 0.95, 0.0, Labels::Percent);
        assert!((a.step - 0.025).abs() < 1e-12, "step {}", a.step);
        assert_eq!(a.label(0.875), "87.5 %");
        assert_eq!(a.label(0.9), "90.0 %");
        let a = AxisMap::linear(0.0, 1.0, 0.0, Labels::Percent);
        assert_eq!(a.label(0.4), "40 %");
        let a = AxisMap::linear(1.0e-6, 1.15e-6, 0.0, Labels::Quantity("A".into()));
        assert!((a.step - 25e-9).abs() < 1e-18, "step {}", a.step);
        assert_eq!(a.label(1.025e-6), "1.025 µA");
        assert_eq!(resolution_exp(2.5), Some(-1));
        assert_eq!(resolution_exp(50.0), Some(1));
        assert_eq!(resolution_exp(0.0), None);
    }

    #[test]
    fn nice_ticks_cover_range_with_round_steps() {
        let (t, step) = nice_ticks(0.0, 1.0, 6);
        assert_eq!(step, 0.2);
        assert_eq!(t, vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        let (t, step) = nice_ticks(0.72, 0.98, 6);
        assert_eq!(step, 0.05);
        assert_eq!(t.first().copied(), Some(0.75));
        assert_eq!(t.last().copied(), Some(0.95));
    }

    #[test]
    fn log_ticks_pick_decades_or_1_2_5() {
        // 1e-9 .. 1e-6: three decades -> decade ticks only.
        let (t, _) = log_ticks(-9.0, -6.0);
        assert_eq!(t.len(), 4);
        // 1e-9 .. 1e-7: two decades -> 1, 2, 5 per decade.
        let (t, _) = log_ticks(-9.0, -7.0);
        assert_eq!(t.len(), 7);
    }

    #[test]
    fn log_axis_rule() {
        assert!(use_log_axis(&[1e-9, 1e-7], None));
        assert!(!use_log_axis(&[1e-9, 9e-8], None));
        assert!(use_log_axis(&[1e-9, 2e-9], Some(Scale::Log)));
        assert!(!use_log_axis(&[0.0, 1.0, 1000.0], Some(Scale::Log)));
    }

    #[test]
    fn bins_clamp_and_count_everything() {
        let c = bin_counts(&[0.0, 0.1, 0.3, 0.99, 1.0, f64::NAN], 0.0, 0.25, 4);
        assert_eq!(c, vec![2, 1, 0, 2]);
    }

    /// An accuracy plot with one unlabelled curve.
    fn one_curve_plot(
        label: &str,
        unit: &str,
        log: bool,
        points: Vec<AccuracyPoint>,
    ) -> AccuracyPlot {
        AccuracyPlot {
            title: "t".into(),
            axis: ParamAxis {
                label: label.into(),
                unit: unit.into(),
                log,
            },
            curves: vec![AccuracyCurve {
                label: String::new(),
                points,
            }],
        }
    }

    /// A point with its 5-95 % band and the references ideal 0.95, baseline 0.96, target 0.85.
    fn full_point(x: f64, mean: f64, p05: f64, p95: f64) -> AccuracyPoint {
        AccuracyPoint {
            x,
            mean,
            p05: Some(p05),
            p95: Some(p95),
            ideal: Some(0.95),
            baseline: Some(0.96),
            target: Some(0.85),
        }
    }

    #[test]
    fn accuracy_plot_has_labels_and_ticks() {
        let points = vec![
            full_point(1e-9, 0.8, 0.7, 0.9),
            full_point(1e-7, 0.9, 0.85, 0.95),
        ];
        let plot = one_curve_plot("stage.bias", "A", true, points);
        let svg = accuracy_vs_param(&plot).unwrap();
        assert!(svg.starts_with("<svg"));
        assert!(svg.contains("stage.bias (A)"));
        assert!(svg.contains("test accuracy"));
        assert!(svg.contains("1 nA") && svg.contains("100 nA"), "{svg}");
        assert!(svg.contains("<polygon"));
    }

    /// When the ideal argmax and the float baseline coincide, the legend says they are equal
    /// (one drawn line) instead of one line hiding the other unmentioned.
    #[test]
    fn equal_ideal_and_baseline_are_named_equal() {
        let mut points = vec![
            full_point(1e-9, 0.8, 0.7, 0.9),
            full_point(1e-7, 0.9, 0.85, 0.95),
        ];
        for p in &mut points {
            p.baseline = p.ideal;
        }
        let svg = accuracy_vs_param(&one_curve_plot("stage.bias", "A", true, points)).unwrap();
        assert!(svg.contains("ideal = baseline (equal)"), "{svg}");
        let points = vec![full_point(1e-9, 0.8, 0.7, 0.9)];
        let svg = accuracy_vs_param(&one_curve_plot("stage.bias", "A", true, points)).unwrap();
        assert!(!svg.contains("(equal)") && svg.contains("linfa baseline"));
    }

    /// A geometric sweep given as a value list (constant ratio) goes on a log axis, where its
    /// points are evenly spaced; an arithmetic one stays linear.
    #[test]
    fn geometric_value_lists_use_a_log_axis() {
        assert!(use_log_axis(&[1e-6, 2e-6, 4e-6, 8e-6], Some(Scale::Linear)));
        assert!(use_log_axis(&[8e-6, 4e-6, 2e-6, 1e-6, 2e-6], None));
        assert!(!use_log_axis(
            &[1e-6, 2e-6, 3e-6, 4e-6],
            Some(Scale::Linear)
        ));
        assert!(!use_log_axis(&[1e-6, 2e-6], None));
        assert!(!use_log_axis(&[-1.0, -2.0, -4.0], None));
    }

    #[test]
    fn degenerate_inputs_do_not_panic() {
        let bare = AccuracyPoint {
            x: 0.0,
            mean: 1.0,
            p05: None,
            p95: None,
            ideal: None,
            baseline: None,
            target: None,
        };
        let plot = one_curve_plot("p", "", false, vec![bare]);
        assert!(accuracy_vs_param(&plot).is_ok());
        let h = AccuracyHistogram {
            title: "h".into(),
            accuracies: Default::default(),
            samples: None,
            target: None,
            ideal: None,
        };
        assert!(accuracy_histogram(&h).is_ok());
        let d = DecisionTimeHistogram::of("d".into(), &[1e-6]);
        assert!(decision_time_histogram(&d).is_ok());
        let m = ConfusionMatrix::zeros("c", vec![]);
        assert!(confusion_heatmap(&m).is_ok());
    }
}
