//! Dotted key paths into a TOML value tree: look-up, assignment (for command-line overrides and
//! sweep points) and "did you mean" suggestions for unknown keys.

use toml::Value;

/// Split a dotted path ("competition.bias_current", "weights.0.levels") into segments.
pub fn segments(path: &str) -> Vec<&str> {
    path.split('.').filter(|s| !s.is_empty()).collect()
}

/// The value at `path`, if every segment exists. Numeric segments index arrays.
pub fn get<'a>(root: &'a Value, path: &str) -> Option<&'a Value> {
    let mut cur = root;
    for seg in segments(path) {
        cur = match cur {
            Value::Table(t) => t.get(seg)?,
            Value::Array(a) => a.get(seg.parse::<usize>().ok()?)?,
            _ => return None,
        };
    }
    Some(cur)
}

/// Why a path could not be assigned.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PathError {
    #[error("`{path}`: `{prefix}` is a value, not a table, so it has no key `{segment}`")]
    NotATable {
        path: String,
        prefix: String,
        segment: String,
    },
    #[error("`{path}`: array `{prefix}` has no element {segment} (it has {len})")]
    BadIndex {
        path: String,
        prefix: String,
        segment: String,
        len: usize,
    },
    #[error("empty key path")]
    Empty,
}

/// Set the value at `path`, creating intermediate tables as needed.
pub fn set(root: &mut Value, path: &str, value: Value) -> Result<(), PathError> {
    let segs = segments(path);
    let Some((last, init)) = segs.split_last() else {
        return Err(PathError::Empty);
    };
    let mut cur = root;
    for (i, seg) in init.iter().enumerate() {
        let prefix = segs[..i].join(".");
        cur = step_mut(cur, path, &prefix, seg)?;
    }
    let prefix = init.join(".");
    match cur {
        Value::Table(t) => {
            t.insert((*last).to_string(), value);
            Ok(())
        }
        Value::Array(a) => {
            let len = a.len();
            let slot = last
                .parse::<usize>()
                .ok()
                .and_then(|i| a.get_mut(i))
                .ok_or_else(|| PathError::BadIndex {
                    path: path.into(),
                    prefix: prefix.clone(),
                    segment: (*last).into(),
                    len,
                })?;
            *slot = value;
            Ok(())
        }
        _ => Err(PathError::NotATable {
            path: path.into(),
            prefix,
            segment: (*last).into(),
        }),
    }
}

fn step_mut<'a>(
    cur: &'a mut Value,
    path: &str,
    prefix: &str,
    seg: &str,
) -> Result<&'a mut Value, PathError> {
    match cur {
        Value::Table(t) => Ok(t
            .entry(seg.to_string())
            .or_insert_with(|| Value::Table(Default::default()))),
        Value::Array(a) => {
            let len = a.len();
            seg.parse::<usize>()
                .ok()
                .and_then(move |i| a.get_mut(i))
                .ok_or_else(|| PathError::BadIndex {
                    path: path.into(),
                    prefix: prefix.into(),
                    segment: seg.into(),
                    len,
                })
        }
        _ => Err(PathError::NotATable {
            path: path.into(),
            prefix: prefix.into(),
            segment: seg.into(),
        }),
    }
}

/// Parse the right-hand side of a command-line override `key=value`: a TOML value if it is one
/// (number, boolean, quoted string, array, inline table), otherwise the bare text as a string
/// (so `--set competition.bias_current=10nA` works without quotes).
pub fn parse_override_value(text: &str) -> Value {
    let text = text.trim();
    match toml::from_str::<toml::Table>(&format!("v = {text}")) {
        Ok(mut t) => t.remove("v").unwrap_or_else(|| Value::String(text.into())),
        Err(_) => Value::String(text.into()),
    }
}

/// Every leaf path of a tree (tables recursed, arrays of tables indexed), in sorted order.
pub fn leaf_paths(root: &Value) -> Vec<String> {
    fn walk(v: &Value, prefix: &str, out: &mut Vec<String>) {
        match v {
            Value::Table(t) => {
                for (k, child) in t {
                    let p = if prefix.is_empty() {
                        k.clone()
                    } else {
                        format!("{prefix}.{k}")
                    };
                    walk(child, &p, out);
                }
            }
            Value::Array(a) if a.iter().all(|x| x.is_table()) && !a.is_empty() => {
                for (i, child) in a.iter().enumerate() {
                    walk(child, &format!("{prefix}.{i}"), out);
                }
            }
            _ => out.push(prefix.to_string()),
        }
    }
    let mut out = Vec::new();
    walk(root, "", &mut out);
    out.sort();
    out
}

/// The candidate closest to `word` by Jaro-Winkler similarity, if it is reasonably close.
pub fn closest<'a, I: IntoIterator<Item = &'a str>>(word: &str, candidates: I) -> Option<&'a str> {
    candidates
        .into_iter()
        .map(|c| (strsim::jaro_winkler(word, c), c))
        .filter(|(s, _)| *s > 0.75)
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, c)| c)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tree() -> Value {
        toml::from_str(
            r#"
            [competition]
            bias_current = "10 nA"
            [[weights]]
            levels = 16
            "#,
        )
        .unwrap()
    }

    #[test]
    fn get_and_set_paths() {
        let mut t = tree();
        assert_eq!(
            get(&t, "competition.bias_current").and_then(|v| v.as_str()),
            Some("10 nA")
        );
        assert_eq!(
            get(&t, "weights.0.levels").and_then(|v| v.as_integer()),
            Some(16)
        );
        set(&mut t, "weights.0.levels", Value::Integer(8)).unwrap();
        set(
            &mut t,
            "conditions.temperature",
            Value::String("350 K".into()),
        )
        .unwrap();
        assert_eq!(
            get(&t, "weights.0.levels").and_then(|v| v.as_integer()),
            Some(8)
        );
        assert_eq!(
            get(&t, "conditions.temperature").and_then(|v| v.as_str()),
            Some("350 K")
        );
        let e = set(&mut t, "weights.3.levels", Value::Integer(1)).unwrap_err();
        assert!(e.to_string().contains("has no element 3"), "{e}");
        let e = set(&mut t, "competition.bias_current.x", Value::Integer(1)).unwrap_err();
        assert!(e.to_string().contains("is a value"), "{e}");
    }

    #[test]
    fn override_values() {
        assert_eq!(parse_override_value("3"), Value::Integer(3));
        assert_eq!(parse_override_value("2.5e-3"), Value::Float(2.5e-3));
        assert_eq!(parse_override_value("10nA"), Value::String("10nA".into()));
        assert_eq!(
            parse_override_value("\"10 nA\""),
            Value::String("10 nA".into())
        );
        assert_eq!(parse_override_value("true"), Value::Boolean(true));
    }

    #[test]
    fn suggestions() {
        let keys = ["bias_current", "sink", "output", "decision"];
        assert_eq!(closest("bias_curent", keys), Some("bias_current"));
        assert_eq!(closest("zzz", keys), None);
        assert_eq!(
            leaf_paths(&tree()),
            vec!["competition.bias_current", "weights.0.levels"]
        );
    }
}
