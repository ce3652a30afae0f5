//! Before and after trim: when `trim.enabled` is a sweep axis, each untrimmed point is paired
//! with the trimmed point of the same other settings, and the report shows both accuracies and
//! yields with the paired change (model notes §11, *Trim*; DESIGN.md §11, paired dies).

use std::fmt::Write as _;

use super::super::folder::ResultsFolder;
use super::super::format::esc;
use super::super::render::{point_label, short_name};
use crate::paired::{newcombe_from_pairs, paired_t_interval};

/// The path of the switch axis.
const AXIS: &str = "trim.enabled";

/// Confidence of the intervals shown (the yield intervals of the report use the same 95 %).
const CONFIDENCE: f64 = 0.95;

/// The section, or nothing when `trim.enabled` is not swept.
pub(super) fn trim_section(folder: &ResultsFolder) -> String {
    let params = &folder.manifest.sweep.parameters;
    let Some(ax) = params.iter().position(|p| p.path == AXIS) else {
        return String::new();
    };
    // The axis value of "true" (the labels give the order of the values).
    let on_value = params[ax]
        .labels
        .as_ref()
        .and_then(|l| l.iter().position(|x| x == "true"))
        .map(|i| i as f64);
    let Some(on_value) = on_value else {
        return String::new();
    };
    let rows = &folder.points.rows;
    let others = |p: &[f64]| -> Vec<u64> {
        p.iter()
            .enumerate()
            .filter(|(i, _)| *i != ax)
            .map(|(_, v)| v.to_bits())
            .collect()
    };
    let z = crate::paired::normal_quantile(CONFIDENCE);
    let mut body = String::new();
    for before in rows
        .iter()
        .filter(|r| r.params.get(ax).is_some_and(|&v| v != on_value))
    {
        let Some(after) = rows.iter().find(|r| {
            r.params.get(ax) == Some(&on_value) && others(&r.params) == others(&before.params)
        }) else {
            continue;
        };
        // The two points' dies, read from chips.csv (the folder keeps only per-point counts);
        // an unreadable file leaves the section out rather than showing partial pairs.
        let acc = |point: u64| -> Option<Vec<(u64, f64)>> {
            let mut v: Vec<(u64, f64)> = Vec::new();
            folder
                .for_each_chip_of(point, |row| v.push((row.chip, row.accuracy)))
                .ok()?;
            v.sort_by_key(|x| x.0);
            Some(v)
        };
        let (Some(a), Some(b)) = (acc(before.point), acc(after.point)) else {
            continue;
        };
        // Paired on the die index: only dies present at both points.
        let pairs: Vec<(f64, f64)> = a
            .iter()
            .filter_map(|(c, x)| {
                b.binary_search_by_key(c, |d| d.0)
                    .ok()
                    .map(|i| (*x, b[i].1))
            })
            .collect();
        if pairs.is_empty() {
            continue;
        }
        let target = before.target.unwrap_or(f64::NAN);
        let d: Vec<f64> = pairs.iter().map(|(x, y)| y - x).collect();
        let t = paired_t_interval(&d, CONFIDENCE);
        let pa: Vec<bool> = pairs.iter().map(|(x, _)| *x >= target).collect();
        let pb: Vec<bool> = pairs.iter().map(|(_, y)| *y >= target).collect();
        let y = newcombe_from_pairs(&pb, &pa, z);
        let n = pairs.len() as f64;
        let mean = |v: &mut dyn Iterator<Item = f64>| v.sum::<f64>() / n;
        let pct = |x: f64| {
            if x.is_finite() {
                format!("{:.1} %", 100.0 * x)
            } else {
                "—".into()
            }
        };
        let pp = |x: f64| {
            if x.is_finite() {
                format!("{:+.1}", 100.0 * x)
            } else {
                "—".into()
            }
        };
        let own = format!("{} = ", short_name(AXIS));
        let settings: Vec<String> = point_label(folder, before)
            .split(", ")
            .filter(|s| !s.starts_with(&own))
            .map(String::from)
            .collect();
        let _ = write!(
            body,
            "<tr><td>{} → {}</td><td>{}</td><td>{}</td><td>{}</td><td>{} [{}, {}]</td><td>{}</td><td>{}</td><td>{} [{}, {}]</td></tr>",
            before.point,
            after.point,
            esc(&if settings.is_empty() { "—".to_string() } else { settings.join(", ") }),
            pairs.len(),
            pct(mean(&mut pairs.iter().map(|p| p.0))),
            pct(mean(&mut pairs.iter().map(|p| p.1))),
            pp(t.lo),
            pp(t.hi),
            pct(pa.iter().filter(|&&x| x).count() as f64 / n),
            pct(pb.iter().filter(|&&x| x).count() as f64 / n),
            pp(y.estimate),
            pp(y.lo),
            pp(y.hi),
        );
    }
    if body.is_empty() {
        return String::new();
    }
    let mut s = String::from(
        r#"<div class="tablewrap" id="trim"><h3>Before and after trim</h3><table><thead><tr><th>points</th><th>other settings</th><th>dies</th><th>accuracy untrimmed</th><th>accuracy trimmed [change, pp, interval]</th><th>yield untrimmed</th><th>yield trimmed</th><th>yield change (pp) [interval]</th></tr></thead><tbody>"#,
    );
    s.push_str(&body);
    let _ = write!(
        s,
        r#"</tbody></table><p class="small">The same dies untrimmed and trimmed (<code>{AXIS}</code> swept; with paired dies each die is the same physical die at both points). Accuracy change: Student t interval on the per-die differences; yield change: Newcombe's paired interval (method 10); both at {:.0} %. Yield = share of dies reaching the target accuracy.</p></div>"#,
        100.0 * CONFIDENCE
    );
    s
}
