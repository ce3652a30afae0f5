//! Reading a labelled dataset from CSV text: one header row, numeric feature columns, one label
//! column (text or integer labels). Handles CRLF line ends, a UTF-8 byte-order mark and quoted
//! fields (via the `csv` crate). Blank lines are skipped.

use std::collections::HashMap;
use std::path::Path;

use ndarray::Array2;

use super::{DataError, Dataset};

/// How to read a CSV file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CsvOptions {
    /// Name of the column holding the class label (default `label`).
    pub label_column: String,
    /// Columns to skip (e.g. sample ids).
    pub ignore_columns: Vec<String>,
}

impl Default for CsvOptions {
    fn default() -> Self {
        CsvOptions {
            label_column: "label".to_string(),
            ignore_columns: Vec::new(),
        }
    }
}

/// Read a dataset from a CSV file. The dataset is named after the file stem; messages name the
/// path as given.
pub fn load_csv(path: &Path, opts: &CsvOptions) -> Result<Dataset, DataError> {
    let shown = path.display().to_string();
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            return Err(DataError::FileNotFound { path: shown })
        }
        Err(e) => {
            return Err(DataError::Io {
                path: shown,
                message: e.to_string(),
            })
        }
    };
    let text = match std::str::from_utf8(&bytes) {
        Ok(t) => t,
        Err(e) => {
            let upto = bytes.get(..e.valid_up_to()).unwrap_or(&[]);
            let line = 1 + upto.iter().filter(|&&b| b == b'\n').count() as u64;
            return Err(DataError::NotUtf8 {
                origin: shown,
                line,
            });
        }
    };
    let mut ds = parse_csv_text(text, &shown, opts)?;
    if let Some(stem) = path.file_stem() {
        ds.name = stem.to_string_lossy().into_owned();
    }
    Ok(ds)
}

/// Parse CSV text into a dataset. `origin_name` names the source in messages and becomes the
/// dataset's name.
pub fn parse_csv_text(
    text: &str,
    origin_name: &str,
    opts: &CsvOptions,
) -> Result<Dataset, DataError> {
    let origin = origin_name.to_string();
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    if text.trim().is_empty() {
        return Err(DataError::Empty { origin });
    }
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let mut records = reader.records();

    let csv_err = |e: csv::Error| {
        let line = e.position().map(|p| p.line()).unwrap_or(0);
        DataError::Csv {
            origin: origin.clone(),
            line,
            message: e.to_string(),
        }
    };

    let header = match records.next() {
        Some(r) => r.map_err(csv_err)?,
        None => return Err(DataError::Empty { origin }),
    };
    let header: Vec<String> = header.iter().map(str::to_string).collect();
    let mut seen: HashMap<&str, usize> = HashMap::new();
    for (i, name) in header.iter().enumerate() {
        if name.is_empty() {
            return Err(DataError::EmptyColumnName {
                origin,
                column: i + 1,
            });
        }
        if let Some(&first) = seen.get(name.as_str()) {
            return Err(DataError::DuplicateColumn {
                origin,
                name: name.clone(),
                first: first + 1,
                second: i + 1,
            });
        }
        seen.insert(name, i);
    }
    let available = header.join(", ");
    let label = opts.label_column.trim();
    let label_col = match seen.get(label) {
        Some(&c) => c,
        None => {
            // One header cell holding `;` or tab characters: the file uses another separator.
            let separator_hint = match header.as_slice() {
                [only] if only.contains(';') => ". The header is one column holding `;`: hardmax reads comma-separated files; write the file with `,` between values".to_string(),
                [only] if only.contains('\t') => ". The header is one column holding tabs: hardmax reads comma-separated files; write the file with `,` between values".to_string(),
                _ => String::new(),
            };
            return Err(DataError::MissingLabelColumn {
                origin,
                label: label.to_string(),
                available,
                separator_hint,
            });
        }
    };
    let mut ignored = vec![false; header.len()];
    for name in &opts.ignore_columns {
        let name = name.trim();
        match seen.get(name) {
            Some(&c) if c == label_col => {
                return Err(DataError::LabelIgnored {
                    origin,
                    label: label.to_string(),
                })
            }
            Some(&c) => {
                if let Some(flag) = ignored.get_mut(c) {
                    *flag = true;
                }
            }
            None => {
                return Err(DataError::UnknownIgnoreColumn {
                    origin,
                    name: name.to_string(),
                    available,
                })
            }
        }
    }
    let feature_cols: Vec<usize> = (0..header.len())
        .filter(|&c| c != label_col && !ignored.get(c).copied().unwrap_or(true))
        .collect();
    if feature_cols.is_empty() {
        return Err(DataError::NoFeatures { origin });
    }
    let feature_names: Vec<String> = feature_cols
        .iter()
        .filter_map(|&c| header.get(c).cloned())
        .collect();

    let mut values: Vec<f64> = Vec::new();
    let mut labels: Vec<String> = Vec::new();
    for record in records {
        let record = record.map_err(csv_err)?;
        let line = record.position().map(|p| p.line()).unwrap_or(0);
        if record.len() != header.len() {
            return Err(DataError::RaggedRow {
                origin,
                line,
                found: record.len(),
                expected: header.len(),
            });
        }
        for &c in &feature_cols {
            let cell = record.get(c).unwrap_or("");
            let column_name = header.get(c).cloned().unwrap_or_default();
            let v: f64 = match cell.parse() {
                Ok(v) => v,
                Err(_) => {
                    return Err(DataError::NonNumeric {
                        origin,
                        line,
                        column: c + 1,
                        column_name,
                        value: cell.to_string(),
                    })
                }
            };
            if !v.is_finite() {
                return Err(DataError::NonFinite {
                    origin,
                    line,
                    column: c + 1,
                    column_name,
                    value: cell.to_string(),
                });
            }
            values.push(v);
        }
        let lab = record.get(label_col).unwrap_or("");
        if lab.is_empty() {
            return Err(DataError::EmptyLabel {
                origin,
                line,
                column: label_col + 1,
                column_name: label.to_string(),
            });
        }
        labels.push(lab.to_string());
    }
    if labels.is_empty() {
        return Err(DataError::NoDataRows { origin });
    }

    let class_names = sorted_classes(&labels);
    if class_names.len() < 2 {
        return Err(DataError::SingleClass {
            origin,
            class: class_names.first().cloned().unwrap_or_default(),
        });
    }
    let index: HashMap<&str, usize> = class_names
        .iter()
        .enumerate()
        .map(|(i, n)| (n.as_str(), i))
        .collect();
    let y: Vec<usize> = labels
        .iter()
        .map(|l| index.get(l.as_str()).copied().unwrap_or(0))
        .collect();
    let x = Array2::from_shape_vec((labels.len(), feature_cols.len()), values).map_err(|e| {
        DataError::Inconsistent {
            dataset: origin.clone(),
            message: e.to_string(),
        }
    })?;
    Ok(Dataset {
        name: origin.clone(),
        feature_names,
        class_names,
        x,
        y,
    })
}

/// Distinct labels, sorted numerically if every label is an integer, otherwise by text.
fn sorted_classes(labels: &[String]) -> Vec<String> {
    let mut distinct: Vec<String> = labels.to_vec();
    distinct.sort();
    distinct.dedup();
    let numeric: Option<Vec<i128>> = distinct.iter().map(|l| l.parse::<i128>().ok()).collect();
    if let Some(nums) = numeric {
        let mut pairs: Vec<(i128, String)> = nums.into_iter().zip(distinct).collect();
        pairs.sort();
        pairs.into_iter().map(|(_, s)| s).collect()
    } else {
        distinct
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Invented toy data (not from any source) for parser behaviour.
    #[test]
    fn parses_crlf_bom_quotes_and_sorts_integer_labels_numerically() {
        let text = "\u{feff}id,\"a\",b,label\r\n1,\"1.5\",2,10\r\n2,3,4e-1,9\r\n\r\n3,-1,0,10\r\n";
        let opts = CsvOptions {
            label_column: "label".into(),
            ignore_columns: vec!["id".into()],
        };
        let ds = parse_csv_text(text, "toy", &opts).unwrap();
        assert_eq!(ds.feature_names, ["a", "b"]);
        assert_eq!(ds.class_names, ["9", "10"]); // numeric order, not text order
        assert_eq!(ds.y, [1, 0, 1]);
        assert_eq!(ds.x.row(1).to_vec(), [3.0, 0.4]);
    }

    #[test]
    fn text_labels_sorted_by_text() {
        let text = "f,label\n1,pear\n2,apple\n3,pear\n";
        let ds = parse_csv_text(text, "toy", &CsvOptions::default()).unwrap();
        assert_eq!(ds.class_names, ["apple", "pear"]);
        assert_eq!(ds.y, [1, 0, 1]);
    }

    #[test]
    fn line_numbers_count_physical_lines() {
        let text = "f,label\n1,a\n\n2,b\nx,a\n";
        let e = parse_csv_text(text, "toy", &CsvOptions::default()).unwrap_err();
        assert!(
            matches!(
                e,
                DataError::NonNumeric {
                    line: 5,
                    column: 1,
                    ..
                }
            ),
            "{e:?}"
        );
    }
}
