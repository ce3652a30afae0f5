//! A simulator's answers to an exported netlist, read from text (no I/O here: the CLI reads the
//! file and passes its name for messages).
//!
//! Two formats:
//! - **ngspice ASCII raw file** (`set filetype=ascii` then `write FILE`), the shipped case: a
//!   `Variables:` list of vector names and a `Values:` list, one value per vector for an
//!   operating point. Vectors are named as in [`Netlist::node_vector`] and
//!   [`Netlist::output_vector`].
//! - **CSV**, the general case for any simulator: a header row `sample, v(<node>)..., i(o<k>)...`
//!   with one column per stage node (names as in the netlist's subcircuit ports, e.g. `v(n0)`,
//!   `v(nc)`) and one per output current `i(o0)..` (the current flowing into output drain k, A,
//!   positive); one row per exported sample, `sample` = 0-based index as in the netlist. Other
//!   columns are ignored; `#` starts a comment line.

use std::collections::HashMap;

use thiserror::Error;

use super::build::Netlist;

/// Every node voltage and output current of every sample, in hardmax's node order.
#[derive(Clone, Debug, PartialEq)]
pub struct SimResults {
    /// `node_voltages[s][i]`, V.
    pub node_voltages: Vec<Vec<f64>>,
    /// `outputs[s][k]`: current into output drain k, A (positive in normal operation).
    pub outputs: Vec<Vec<f64>>,
}

/// Why a simulator's output could not be read.
#[derive(Debug, Error, PartialEq)]
pub enum SimResultsError {
    #[error("{file}:{line}: {message}")]
    Syntax {
        file: String,
        line: usize,
        message: String,
    },
    #[error(
        "{file}:{line}: the simulator output holds {found} sample(s) but {expected} were exported; \
         simulate the netlist written with this export (same --samples)"
    )]
    SampleCount {
        file: String,
        line: usize,
        found: usize,
        expected: usize,
    },
    #[error("{file}: vector `{name}` (sample {sample}) is missing; was the netlist edited?")]
    Missing {
        file: String,
        sample: usize,
        name: String,
    },
    #[error("{file}:{line}: missing column `{column}`; the header must name `sample`, every node as `v(<node>)` and every output as `i(o<k>)`")]
    MissingColumn {
        file: String,
        line: usize,
        column: String,
    },
}

/// Parse an ngspice ASCII raw file of one operating point into (vector name, value, line).
pub fn parse_ascii_raw(
    text: &str,
    file: &str,
) -> Result<Vec<(String, f64, usize)>, SimResultsError> {
    let syntax = |line: usize, message: String| SimResultsError::Syntax {
        file: file.into(),
        line,
        message,
    };
    let lines: Vec<&str> = text.lines().collect();
    let mut count = None;
    let mut names: Vec<(String, usize)> = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        let l = lines[i].trim();
        if let Some(v) = l.strip_prefix("No. Variables:") {
            count =
                Some(v.trim().parse::<usize>().map_err(|e| {
                    syntax(i + 1, format!("bad variable count `{}`: {e}", v.trim()))
                })?);
        } else if let Some(p) = l.strip_prefix("No. Points:") {
            let p = p.trim();
            if p != "1" {
                return Err(syntax(
                    i + 1,
                    format!("{p} points: expected one operating point (.op), not a sweep"),
                ));
            }
        } else if l == "Variables:" {
            let c = count
                .ok_or_else(|| syntax(i + 1, "`Variables:` before `No. Variables:`".into()))?;
            for j in 0..c {
                let ln = i + 1 + j;
                let f: Vec<&str> = lines
                    .get(ln)
                    .map(|x| x.split_whitespace().collect())
                    .unwrap_or_default();
                if f.len() < 2 {
                    return Err(syntax(
                        ln + 1,
                        format!("expected variable {j}: `index name type`"),
                    ));
                }
                names.push((f[1].to_lowercase(), ln + 1));
            }
            i += c;
        } else if l == "Values:" {
            let c = names.len();
            let mut out = Vec::with_capacity(c);
            let mut j = i + 1;
            let mut first = true;
            while out.len() < c {
                let Some(raw) = lines.get(j) else {
                    return Err(syntax(
                        j,
                        format!("file ends after {} of {c} values", out.len()),
                    ));
                };
                let mut f = raw.split_whitespace();
                if first {
                    // The first value line carries the point index.
                    f.next();
                    first = false;
                }
                for tok in f {
                    let v: f64 = tok
                        .parse()
                        .map_err(|e| syntax(j + 1, format!("bad number `{tok}`: {e}")))?;
                    let k = out.len();
                    if k < c {
                        out.push((names[k].0.clone(), v, j + 1));
                    }
                }
                j += 1;
            }
            return Ok(out);
        }
        i += 1;
    }
    Err(syntax(
        lines.len(),
        "no `Values:` section: is this an ngspice ASCII raw file (set filetype=ascii)?".into(),
    ))
}

/// The sample index of a vector name `v(s<k>_...)` or `i(vo_s<k>_...)`.
fn sample_of(name: &str) -> Option<usize> {
    let rest = name
        .strip_prefix("v(s")
        .or_else(|| name.strip_prefix("i(vo_s"))?;
    let digits: String = rest.chars().take_while(char::is_ascii_digit).collect();
    digits.parse().ok()
}

impl SimResults {
    /// Results from parsed raw vectors for a netlist of `n` lines, stage nodes `nodes` and
    /// `samples` samples.
    pub fn from_vectors(
        vectors: &[(String, f64, usize)],
        n: usize,
        nodes: &[String],
        samples: usize,
        file: &str,
    ) -> Result<SimResults, SimResultsError> {
        let mut found = 0usize;
        let mut last_line = 0;
        for (name, _, line) in vectors {
            if let Some(s) = sample_of(name) {
                if s + 1 > found {
                    found = s + 1;
                    last_line = *line;
                }
            }
        }
        if found != samples {
            return Err(SimResultsError::SampleCount {
                file: file.into(),
                line: last_line,
                found,
                expected: samples,
            });
        }
        let map: HashMap<&str, f64> = vectors.iter().map(|(k, v, _)| (k.as_str(), *v)).collect();
        let get = |s: usize, name: String| {
            map.get(name.as_str())
                .copied()
                .ok_or(SimResultsError::Missing {
                    file: file.into(),
                    sample: s,
                    name,
                })
        };
        let mut node_voltages = Vec::with_capacity(samples);
        let mut outputs = Vec::with_capacity(samples);
        for s in 0..samples {
            node_voltages.push(
                nodes
                    .iter()
                    .map(|nd| get(s, Netlist::node_vector(s, nd)))
                    .collect::<Result<Vec<_>, _>>()?,
            );
            // The branch current flows into the source's positive terminal: minus the output.
            outputs.push(
                (0..n)
                    .map(|k| get(s, Netlist::output_vector(s, k)).map(|i| -i))
                    .collect::<Result<Vec<_>, _>>()?,
            );
        }
        Ok(SimResults {
            node_voltages,
            outputs,
        })
    }

    /// Results from an ngspice ASCII raw file's text.
    pub fn from_raw(
        text: &str,
        file: &str,
        n: usize,
        nodes: &[String],
        samples: usize,
    ) -> Result<SimResults, SimResultsError> {
        let v = parse_ascii_raw(text, file)?;
        SimResults::from_vectors(&v, n, nodes, samples, file)
    }
}

/// Parse the general CSV format (module docs) for `n` lines, stage nodes `nodes`, `samples`
/// samples.
pub fn parse_results_csv(
    text: &str,
    file: &str,
    n: usize,
    nodes: &[String],
    samples: usize,
) -> Result<SimResults, SimResultsError> {
    let syntax = |line: usize, message: String| SimResultsError::Syntax {
        file: file.into(),
        line,
        message,
    };
    let mut rows = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim()))
        .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
    let (hline, header) = rows
        .next()
        .ok_or_else(|| syntax(1, "empty file: expected a header row".into()))?;
    let cols: Vec<String> = header
        .split(',')
        .map(|c| c.trim().trim_matches('"').to_lowercase())
        .collect();
    let col = |name: String| {
        cols.iter()
            .position(|c| *c == name)
            .ok_or(SimResultsError::MissingColumn {
                file: file.into(),
                line: hline,
                column: name,
            })
    };
    let sample_col = col("sample".into())?;
    let node_cols = nodes
        .iter()
        .map(|nd| col(format!("v({nd})")))
        .collect::<Result<Vec<_>, _>>()?;
    let out_cols = (0..n)
        .map(|k| col(format!("i(o{k})")))
        .collect::<Result<Vec<_>, _>>()?;
    let mut got: Vec<Option<(Vec<f64>, Vec<f64>)>> = vec![None; samples];
    let mut count = 0;
    let mut last = hline;
    for (line, l) in rows {
        last = line;
        count += 1;
        let f: Vec<&str> = l.split(',').map(str::trim).collect();
        if f.len() != cols.len() {
            return Err(syntax(
                line,
                format!("{} fields, header has {}", f.len(), cols.len()),
            ));
        }
        let num = |i: usize| -> Result<f64, SimResultsError> {
            let v: f64 = f[i].parse().map_err(|e| {
                syntax(
                    line,
                    format!("column `{}`: bad number `{}`: {e}", cols[i], f[i]),
                )
            })?;
            if v.is_finite() {
                Ok(v)
            } else {
                Err(syntax(
                    line,
                    format!("column `{}`: not a finite number", cols[i]),
                ))
            }
        };
        let s: usize = f[sample_col].parse().map_err(|_| {
            syntax(
                line,
                format!("sample `{}` is not a 0-based index", f[sample_col]),
            )
        })?;
        if s >= samples {
            return Err(SimResultsError::SampleCount {
                file: file.into(),
                line,
                found: s + 1,
                expected: samples,
            });
        }
        if got[s].is_some() {
            return Err(syntax(line, format!("sample {s} appears twice")));
        }
        let v = node_cols
            .iter()
            .map(|&i| num(i))
            .collect::<Result<Vec<_>, _>>()?;
        let o = out_cols
            .iter()
            .map(|&i| num(i))
            .collect::<Result<Vec<_>, _>>()?;
        got[s] = Some((v, o));
    }
    if count != samples {
        return Err(SimResultsError::SampleCount {
            file: file.into(),
            line: last,
            found: count,
            expected: samples,
        });
    }
    let (node_voltages, outputs) = got.into_iter().flatten().unzip();
    Ok(SimResults {
        node_voltages,
        outputs,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const RAW: &str = "Title: * t\nPlotname: Operating Point\nFlags: real\nNo. Variables: 4\nNo. Points: 1\nVariables:\n\t0\tv(s0_n0)\tvoltage\n\t1\tv(s0_nc)\tvoltage\n\t2\ti(vo_s0_0)\tcurrent\n\t3\tv(s1_n0)\tvoltage\nValues:\n 0\t1.5e-01\n\t2.0e-01\n\t-3e-9\n\t4e-1\n";

    /// Layout of ngspice's ASCII raw file (ngspice manual, chapter "write" / raw file format).
    #[test]
    fn raw_file_is_read_in_order() {
        let v = parse_ascii_raw(RAW, "t.raw").unwrap();
        assert_eq!(v.len(), 4);
        assert_eq!(v[2].0, "i(vo_s0_0)");
        approx::assert_relative_eq!(v[2].1, -3e-9);
        assert_eq!(v[3].2, 15);
    }

    #[test]
    fn sample_count_mismatch_names_file_and_line() {
        let v = parse_ascii_raw(RAW, "t.raw").unwrap();
        let e =
            SimResults::from_vectors(&v, 1, &["n0".into(), "nc".into()], 3, "t.raw").unwrap_err();
        assert!(
            matches!(
                e,
                SimResultsError::SampleCount {
                    found: 2,
                    expected: 3,
                    ..
                }
            ),
            "{e}"
        );
        assert!(e.to_string().starts_with("t.raw:"), "{e}");
    }

    #[test]
    fn csv_rows_and_errors() {
        let nodes = ["n0".to_string(), "nc".to_string()];
        let ok = "sample,v(n0),v(nc),i(o0)\n1,0.1,0.2,1e-9\n0,0.3,0.4,2e-9\n";
        let r = parse_results_csv(ok, "r.csv", 1, &nodes, 2).unwrap();
        approx::assert_relative_eq!(r.node_voltages[0][0], 0.3);
        approx::assert_relative_eq!(r.outputs[1][0], 1e-9);
        let e = parse_results_csv(ok, "r.csv", 1, &nodes, 3).unwrap_err();
        assert!(
            matches!(e, SimResultsError::SampleCount { line: 3, .. }),
            "{e}"
        );
        let e = parse_results_csv("sample,v(n0),i(o0)\n", "r.csv", 1, &nodes, 1).unwrap_err();
        assert!(e.to_string().contains("v(nc)"), "{e}");
        let e = parse_results_csv("sample,v(n0),v(nc),i(o0)\n0,x,1,1\n", "r.csv", 1, &nodes, 1)
            .unwrap_err();
        assert!(e.to_string().starts_with("r.csv:2:"), "{e}");
    }
}
