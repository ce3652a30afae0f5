//! I-V sweep files for calibration (`hardmax fit-device`, `hardmax fit-pelgrom`).
//!
//! CSV with a header row; column names are case-insensitive, order free, SI units, `#` starts a
//! comment line:
//!
//! | column | required | meaning |
//! |---|---|---|
//! | `vg`, `vd` | yes | gate and drain voltage, V |
//! | `vs`, `vb` | no (0) | source and bulk voltage, V |
//! | `id` | yes | drain current, A; NMOS convention: positive into the drain when vd > vs |
//! | `w`, `l` | yes | drawn width and length, m |
//! | `temperature` | no (the command's `--temperature`) | device temperature, K |
//! | `device` | for `fit-pelgrom` | name of the physical device the row belongs to |
//!
//! Rows form sweeps: consecutive rows of one device where only vg changes are a gate sweep and
//! vg must move in one direction throughout it; where only vd changes, a drain sweep, likewise.

use std::path::Path;

use thiserror::Error;

use hardmax_core::calibration::IvPoint;

/// One row: the point and its device name (empty when there is no `device` column).
#[derive(Clone, Debug, PartialEq)]
pub struct IvRow {
    pub point: IvPoint,
    pub device: String,
}

#[derive(Debug, Error)]
pub enum IvCsvError {
    #[error("cannot read `{path}`: {err}")]
    Read {
        path: String,
        #[source]
        err: std::io::Error,
    },
    #[error("{path}:{line}: {message}")]
    Line {
        path: String,
        line: usize,
        message: String,
    },
}

/// Parse I-V text; `path` names the file in messages. `temperature` is used when the file has
/// no temperature column.
pub fn parse_iv(
    text: &str,
    path: &str,
    temperature: Option<f64>,
) -> Result<Vec<IvRow>, IvCsvError> {
    let err = |line: usize, message: String| IvCsvError::Line {
        path: path.into(),
        line,
        message,
    };
    let mut rows = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim()))
        .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
    let (hline, header) = rows.next().ok_or_else(|| {
        err(
            1,
            "empty file: expected a header row (vg,vd,id,w,l,...)".into(),
        )
    })?;
    let cols: Vec<String> = header
        .split(',')
        .map(|c| c.trim().trim_matches('"').to_lowercase())
        .collect();
    let find = |name: &str| cols.iter().position(|c| c == name);
    let need = |name: &str| {
        find(name).ok_or_else(|| {
            err(
                hline,
                format!(
                    "missing column `{name}`; the header needs vg, vd, id, w, l (and optionally vs, vb, temperature, device); it has: {}",
                    cols.join(", ")
                ),
            )
        })
    };
    let (cvg, cvd, cid, cw, cl) = (
        need("vg")?,
        need("vd")?,
        need("id")?,
        need("w")?,
        need("l")?,
    );
    let (cvs, cvb, ct, cdev) = (find("vs"), find("vb"), find("temperature"), find("device"));
    if ct.is_none() && temperature.is_none() {
        return Err(err(
            hline,
            "no `temperature` column: add one (K) or give --temperature".into(),
        ));
    }
    let mut out: Vec<IvRow> = Vec::new();
    // Current sweep: (kind 'g' or 'd', direction +1/-1).
    let mut run: Option<(char, f64)> = None;
    for (line, l) in rows {
        let f: Vec<&str> = l.split(',').map(|x| x.trim().trim_matches('"')).collect();
        if f.len() != cols.len() {
            return Err(err(
                line,
                format!("{} fields, the header has {}", f.len(), cols.len()),
            ));
        }
        let num = |c: usize| -> Result<f64, IvCsvError> {
            let v: f64 = f[c].parse().map_err(|_| {
                err(
                    line,
                    format!("column `{}`: `{}` is not a number", cols[c], f[c]),
                )
            })?;
            if v.is_finite() {
                Ok(v)
            } else {
                Err(err(
                    line,
                    format!("column `{}`: not a finite number", cols[c]),
                ))
            }
        };
        let p = IvPoint {
            vg: num(cvg)?,
            vd: num(cvd)?,
            vs: cvs.map(num).transpose()?.unwrap_or(0.0),
            vb: cvb.map(num).transpose()?.unwrap_or(0.0),
            id: num(cid)?,
            temperature: match ct {
                Some(c) => num(c)?,
                None => temperature.unwrap_or(300.0),
            },
            w: num(cw)?,
            l: num(cl)?,
            line,
        };
        if !(p.w > 0.0 && p.w < 1e-2 && p.l > 0.0 && p.l < 1e-2) {
            return Err(err(
                line,
                format!(
                    "w = {:e}, l = {:e}: give sizes in metres (e.g. 2e-6)",
                    p.w, p.l
                ),
            ));
        }
        if !(p.temperature > 0.0 && p.temperature < 1000.0) {
            return Err(err(
                line,
                format!(
                    "temperature {} must be in kelvin (0 to 1000 K)",
                    p.temperature
                ),
            ));
        }
        if p.vd > p.vs && p.id < 0.0 {
            return Err(err(
                line,
                format!(
                    "id = {:e} A is negative with vd > vs: the NMOS convention is current into the drain, positive; flip the sign of the id column",
                    p.id
                ),
            ));
        }
        let device = cdev.map(|c| f[c].to_string()).unwrap_or_default();
        if let Some(prev) = out.last() {
            let q = &prev.point;
            let same_dev = prev.device == device
                && q.vs == p.vs
                && q.vb == p.vb
                && q.temperature == p.temperature
                && q.w == p.w
                && q.l == p.l;
            let kind = if !same_dev {
                None
            } else if q.vd == p.vd && q.vg != p.vg {
                Some(('g', (p.vg - q.vg).signum()))
            } else if q.vg == p.vg && q.vd != p.vd {
                Some(('d', (p.vd - q.vd).signum()))
            } else if q.vg == p.vg && q.vd == p.vd {
                return Err(err(line, "the same bias point as the row before it".into()));
            } else {
                None
            };
            match (run, kind) {
                (Some((k0, d0)), Some((k, d))) if k0 == k && d0 != d => {
                    let what = if k == 'g' {
                        "gate sweep (vg)"
                    } else {
                        "drain sweep (vd)"
                    };
                    return Err(err(
                        line,
                        format!("{what} turns back here: a sweep must be monotone; start a new sweep (change vd or vg) instead"),
                    ));
                }
                _ => run = kind,
            }
        }
        out.push(IvRow { point: p, device });
    }
    if out.is_empty() {
        return Err(err(hline, "no data rows after the header".into()));
    }
    Ok(out)
}

/// Read and parse an I-V file.
pub fn read_iv(path: &Path, temperature: Option<f64>) -> Result<Vec<IvRow>, IvCsvError> {
    let text = std::fs::read_to_string(path).map_err(|err| IvCsvError::Read {
        path: path.display().to_string(),
        err,
    })?;
    parse_iv(&text, &path.display().to_string(), temperature)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn msg(text: &str) -> String {
        parse_iv(text, "iv.csv", Some(300.0))
            .unwrap_err()
            .to_string()
    }

    #[test]
    fn bad_files_name_file_and_line() {
        let m = msg("vg,vd,w,l\n0.1,1,1e-6,1e-6\n");
        assert!(m.starts_with("iv.csv:1:") && m.contains("`id`"), "{m}");
        let m = msg("vg,vd,id,w,l\n0.1,1,1e-9,1e-6,1e-6\n0.2,1,-2e-9,1e-6,1e-6\n");
        assert!(m.starts_with("iv.csv:3:") && m.contains("negative"), "{m}");
        let m = msg(
            "vg,vd,id,w,l\n0.1,1,1e-9,1e-6,1e-6\n0.2,1,2e-9,1e-6,1e-6\n0.15,1,3e-9,1e-6,1e-6\n",
        );
        assert!(m.starts_with("iv.csv:4:") && m.contains("monotone"), "{m}");
        let m = msg("vg,vd,id,w,l\n0.1,1,abc,1e-6,1e-6\n");
        assert!(m.starts_with("iv.csv:2:"), "{m}");
        let e = parse_iv("vg,vd,id,w,l\n0.1,1,1e-9,1e-6,1e-6\n", "iv.csv", None).unwrap_err();
        assert!(e.to_string().contains("temperature"), "{e}");
    }

    #[test]
    fn sweeps_at_several_drain_voltages_are_accepted() {
        let t = "vg,vd,id,w,l\n0.1,0.1,1e-9,1e-6,1e-6\n0.2,0.1,2e-9,1e-6,1e-6\n0.1,1,1e-9,1e-6,1e-6\n0.2,1,2e-9,1e-6,1e-6\n";
        assert_eq!(parse_iv(t, "iv.csv", Some(300.0)).unwrap().len(), 4);
    }
}
