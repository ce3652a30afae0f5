//! `hardmax fit-device` and `hardmax fit-pelgrom`: calibration of the NMOS EKV parameters and of
//! the Pelgrom threshold constant from I-V sweep files (format in `io::ivcsv` and DEVELOPERS.md);
//! the numerical fit is in [`crate::calibration`].

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::PathBuf;

use anyhow::{bail, Context};
use clap::Args;
use serde_json::json;

use crate::calibration::{
    fit_ekv, fit_pelgrom, fit_vt0_only, EkvFit, FitOptions, IvPoint, Region, SizeGroup,
};
use crate::device::preset;
use crate::io::ivcsv::{read_iv, IvRow};
use crate::io::write_atomic;
use crate::physics::thermal_voltage;
use crate::units::{format_si, parse_quantity, Dimension};

#[derive(Debug, Args)]
#[command(after_help = crate::CAUTION)]
pub struct FitArgs {
    /// I-V files (CSV: vg, vd, id, w, l, optional vs, vb, temperature, device).
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// Temperature of files without a temperature column, e.g. "27 degC" or "300 K".
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
    /// Smallest forward inversion coefficient of the points fitted.
    #[arg(long, default_value_t = 0.0)]
    pub ic_min: f64,
    /// Largest forward inversion coefficient of the points fitted [default: 10, weak to
    /// moderate inversion].
    #[arg(long, default_value_t = 10.0)]
    pub ic_max: f64,
    /// Points below this current are left out (leakage, measurement floor).
    #[arg(long, value_name = "CURRENT", default_value = "100 fA")]
    pub current_floor: String,
    /// Generic preset the `[process]` block starts from; its nominal temperature is the fit's
    /// reference temperature.
    #[arg(long, default_value = "generic-180nm")]
    pub preset: String,
    /// Write the `[process]` block (TOML) here.
    #[arg(long, short, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Write the fit (parameters, residuals by region) as JSON here.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

#[derive(Debug, Args)]
#[command(after_help = crate::CAUTION)]
pub struct PelgromArgs {
    /// I-V files with a `device` column: gate sweeps of many devices at several sizes.
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// Temperature of files without a temperature column.
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
    /// Two-sided confidence of the interval of A_VT.
    #[arg(long, default_value_t = 0.95)]
    pub confidence: f64,
    /// Largest forward inversion coefficient used for each device's threshold.
    #[arg(long, default_value_t = 10.0)]
    pub ic_max: f64,
    /// Generic preset (its nominal temperature is the reference temperature).
    #[arg(long, default_value = "generic-180nm")]
    pub preset: String,
    /// Write the result as JSON here.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

fn read_all(files: &[PathBuf], temperature: &Option<String>) -> anyhow::Result<Vec<IvRow>> {
    let t = temperature
        .as_deref()
        .map(|t| parse_quantity(t, Dimension::Temperature))
        .transpose()
        .context("--temperature")?;
    let mut rows = Vec::new();
    for f in files {
        rows.extend(read_iv(f, t)?);
    }
    Ok(rows)
}

fn names(files: &[PathBuf]) -> String {
    files
        .iter()
        .map(|f| f.display().to_string())
        .collect::<Vec<_>>()
        .join(", ")
}

/// The `[process]` block of a fit.
fn process_block(fit: &EkvFit, preset_name: &str, points: &[IvPoint], files: &str) -> String {
    let p = &fit.params;
    let mut s = String::new();
    writeln!(
        s,
        "# hardmax fit-device: NMOS EKV parameters fitted to {files}"
    )
    .unwrap();
    writeln!(
        s,
        "# reference temperature {} K; {} points in the fit (IC region as stated by the command); RMS ln-current error by region:",
        fit.t_ref, fit.points_used
    )
    .unwrap();
    for r in &fit.by_region {
        writeln!(
            s,
            "#   {:<8} {:>5} points  rms {:.3e}  max {:.3e}",
            r.name, r.points, r.rms_ln, r.max_ln
        )
        .unwrap();
    }
    if !fit.temperature_fitted {
        writeln!(s, "# one temperature only: vt0_tempco and beta_temp_exponent are the preset's (not fitted)").unwrap();
    }
    writeln!(s, "# {}", crate::CAUTION).unwrap();
    writeln!(s, "[process]").unwrap();
    writeln!(s, "preset = \"{preset_name}\"").unwrap();
    writeln!(s).unwrap();
    writeln!(s, "[process.nmos]").unwrap();
    writeln!(s, "vt0 = \"{:e} V\"", p.vt0).unwrap();
    writeln!(s, "n = {:e}", p.n).unwrap();
    writeln!(s, "mu_cox = \"{:e} A/V^2\"", p.mu_cox).unwrap();
    if p.eta > 0.0 {
        // eta = n U_T(T_ref) / (V_A/L * L) at the mean fitted length.
        let l = points.iter().map(|q| q.l).sum::<f64>() / points.len().max(1) as f64;
        let va_per_l = p.n * thermal_voltage(fit.t_ref) / (p.eta * l);
        writeln!(
            s,
            "early_voltage_per_length = \"{va_per_l:e} V/m\"  # fitted eta = {:e} at L = {}",
            p.eta,
            format_si(l, "m", 4)
        )
        .unwrap();
    } else {
        writeln!(
            s,
            "# fitted drain coupling eta = {:e} is not positive: the preset's is kept",
            p.eta
        )
        .unwrap();
    }
    if fit.temperature_fitted {
        writeln!(s, "vt0_tempco = \"{:e} V/K\"", p.vt0_tempco).unwrap();
        writeln!(s, "beta_temp_exponent = {:e}", p.beta_temp_exponent).unwrap();
    }
    s
}

fn fit_json(fit: &EkvFit) -> serde_json::Value {
    let p = &fit.params;
    json!({
        "t_ref_k": fit.t_ref,
        "temperature_fitted": fit.temperature_fitted,
        "points_used": fit.points_used,
        "iterations": fit.iterations,
        "rms_ln": fit.rms_ln,
        "params": {"vt0": p.vt0, "n": p.n, "mu_cox": p.mu_cox, "eta": p.eta,
                   "vt0_tempco": p.vt0_tempco, "beta_temp_exponent": p.beta_temp_exponent},
        "by_region": fit.by_region.iter().map(|r| json!({
            "region": r.name, "ic_min": r.ic_min,
            "ic_max": if r.ic_max.is_finite() { json!(r.ic_max) } else { json!(null) },
            "points": r.points,
            "rms_ln": if r.rms_ln.is_finite() { json!(r.rms_ln) } else { json!(null) },
            "max_ln": r.max_ln})).collect::<Vec<_>>(),
    })
}

pub fn fit_device(args: FitArgs) -> anyhow::Result<()> {
    let rows = read_all(&args.files, &args.temperature)?;
    let process = preset(&args.preset).map_err(|e| anyhow::anyhow!("--preset: {e}"))?;
    let opts = FitOptions {
        region: Region {
            ic_min: args.ic_min,
            ic_max: args.ic_max,
        },
        t_ref: process.t_nom,
        current_floor: parse_quantity(&args.current_floor, Dimension::Current)
            .context("--current-floor")?,
        vt0_tempco: process.nmos.vt0_tempco,
        beta_temp_exponent: process.nmos.beta_temp_exponent,
    };
    if !(opts.region.ic_min >= 0.0 && opts.region.ic_max > opts.region.ic_min) {
        bail!("--ic-min/--ic-max: need 0 <= ic-min < ic-max");
    }
    let points: Vec<IvPoint> = rows.iter().map(|r| r.point).collect();
    let files = names(&args.files);
    let fit = fit_ekv(&points, &opts).with_context(|| format!("fitting {files}"))?;
    let p = &fit.params;
    println!(
        "EKV fit of {files} ({} points, {} in the region IC {}..{})",
        points.len(),
        fit.points_used,
        args.ic_min,
        args.ic_max
    );
    println!("  vt0    {}", format_si(p.vt0, "V", 6));
    println!("  n      {:.6}", p.n);
    println!("  mu_cox {}", format_si(p.mu_cox, "A/V^2", 6));
    println!("  eta    {:.6e}", p.eta);
    if fit.temperature_fitted {
        println!("  vt0_tempco {}", format_si(p.vt0_tempco, "V/K", 4));
        println!("  beta_temp_exponent {:.4}", p.beta_temp_exponent);
    } else {
        println!("  (one temperature: temperature laws not fitted)");
    }
    println!("residuals by region (ln I_model - ln I_data; 0.01 is about 1 %):");
    println!(
        "  {:<8} {:>6} {:>11} {:>11}",
        "region", "points", "rms", "max"
    );
    for r in &fit.by_region {
        println!(
            "  {:<8} {:>6} {:>11.3e} {:>11.3e}",
            r.name, r.points, r.rms_ln, r.max_ln
        );
    }
    let block = process_block(&fit, &args.preset, &points, &files);
    match &args.out {
        Some(o) => {
            write_atomic(o, block.as_bytes())?;
            println!("process block: {}", o.display());
        }
        None => print!("\n{block}"),
    }
    if let Some(j) = &args.json {
        write_atomic(j, serde_json::to_string_pretty(&fit_json(&fit))?.as_bytes())?;
    }
    println!("{}", crate::CAUTION);
    Ok(())
}

pub fn fit_pelgrom_cmd(args: PelgromArgs) -> anyhow::Result<()> {
    let rows = read_all(&args.files, &args.temperature)?;
    let files = names(&args.files);
    if rows.iter().any(|r| r.device.is_empty()) {
        bail!("{files}: a `device` column naming each physical device is needed for a Pelgrom fit");
    }
    let process = preset(&args.preset).map_err(|e| anyhow::anyhow!("--preset: {e}"))?;
    let opts = FitOptions {
        region: Region {
            ic_min: 0.0,
            ic_max: args.ic_max,
        },
        t_ref: process.t_nom,
        vt0_tempco: process.nmos.vt0_tempco,
        beta_temp_exponent: process.nmos.beta_temp_exponent,
        ..FitOptions::default()
    };
    let all: Vec<IvPoint> = rows.iter().map(|r| r.point).collect();
    let global = fit_ekv(&all, &opts).with_context(|| format!("fitting {files}"))?;
    let mut by_device: BTreeMap<&str, Vec<IvPoint>> = BTreeMap::new();
    for r in &rows {
        by_device.entry(&r.device).or_default().push(r.point);
    }
    // Group device thresholds by size (W, L to 1e-12 m).
    let mut sizes: BTreeMap<(i64, i64), SizeGroup> = BTreeMap::new();
    for (dev, pts) in &by_device {
        let (vt, _) = fit_vt0_only(pts, &global.params, &opts)
            .with_context(|| format!("{files}: device `{dev}`"))?;
        let (w, l) = (pts[0].w, pts[0].l);
        let key = ((w * 1e12).round() as i64, (l * 1e12).round() as i64);
        sizes
            .entry(key)
            .or_insert_with(|| SizeGroup {
                w,
                l,
                dvt: Vec::new(),
            })
            .dvt
            .push(vt - global.params.vt0);
    }
    let groups: Vec<SizeGroup> = sizes.into_values().collect();
    let fit = fit_pelgrom(&groups, args.confidence)?;
    let mvum = |x: f64| x * 1e9;
    println!(
        "Pelgrom fit of {files}: {} devices in {} sizes, {} degrees of freedom",
        by_device.len(),
        groups.len(),
        fit.dof
    );
    println!(
        "  A_VT (pair) = {:.4} mV·um, {:.0} % interval {:.4} .. {:.4} mV·um (chi-square)",
        mvum(fit.a_vt_pair),
        100.0 * fit.confidence,
        mvum(fit.a_vt_lo),
        mvum(fit.a_vt_hi)
    );
    println!(
        "  {:>10} {:>10} {:>8} {:>14} {:>16}",
        "W", "L", "devices", "sigma(dVT)", "A_VT this size"
    );
    for (w, l, m, s, a) in &fit.per_size {
        println!(
            "  {:>10} {:>10} {:>8} {:>14} {:>12.4} mV·um",
            format_si(*w, "m", 3),
            format_si(*l, "m", 3),
            m,
            format_si(*s, "V", 4),
            mvum(*a)
        );
    }
    println!(
        "experiment key: [process.nmos] a_vt = \"{:.4} mV um\"",
        mvum(fit.a_vt_pair)
    );
    if let Some(j) = &args.json {
        let v = json!({
            "a_vt_pair": fit.a_vt_pair, "a_vt_lo": fit.a_vt_lo, "a_vt_hi": fit.a_vt_hi,
            "confidence": fit.confidence, "dof": fit.dof, "devices": by_device.len(),
            "sizes": fit.per_size.iter().map(|(w, l, m, s, a)| json!({"w": w, "l": l, "devices": m, "sigma_dvt": s, "a_vt": a})).collect::<Vec<_>>(),
        });
        write_atomic(j, serde_json::to_string_pretty(&v)?.as_bytes())?;
    }
    println!("{}", crate::CAUTION);
    Ok(())
}
