//! CSV loading: good input with CRLF/BOM/quotes, and every bad-input case, with the fixture files
//! under tests/data/csv/ (invented data, see the README there). The expected behaviour is the
//! CSV format of RFC 4180 (quoted fields, CRLF line ends) plus the rules in src/data.

use std::path::PathBuf;

use hardmax::data::{
    load_csv, parse_csv_text, stratified_kfold, stratified_split, CsvOptions, DataError, Dataset,
};
use ndarray::array;

fn fixture(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/csv")
        .join(name)
}

fn load(name: &str) -> Result<Dataset, DataError> {
    load_csv(&fixture(name), &CsvOptions::default())
}

fn err(name: &str) -> (DataError, String) {
    let e = load(name).expect_err(name);
    let msg = e.to_string();
    (e, msg)
}

#[test]
fn good_file_with_bom_crlf_quotes_and_ignored_column() {
    let opts = CsvOptions {
        label_column: "label".into(),
        ignore_columns: vec!["sample_id".into()],
    };
    let ds = load_csv(&fixture("good_crlf_bom.csv"), &opts).unwrap();
    assert_eq!(ds.name, "good_crlf_bom");
    assert_eq!(ds.feature_names, ["width_mm", "weight_g"]);
    assert_eq!(ds.class_names, ["apple", "pear"]); // sorted by text
    assert_eq!(ds.y, [1, 0, 1, 0, 1]);
    assert_eq!(ds.x.row(0).to_vec(), [61.5, 140.0]);
    assert_eq!(ds.x.row(4).to_vec(), [58.5, 128.0]);
}

#[test]
fn missing_file_names_the_path() {
    let (e, msg) = err("does_not_exist.csv");
    assert!(matches!(e, DataError::FileNotFound { .. }));
    assert!(
        msg.contains("does_not_exist.csv") && msg.contains("does not exist"),
        "{msg}"
    );
}

#[test]
fn empty_file() {
    let (e, msg) = err("empty.csv");
    assert!(matches!(e, DataError::Empty { .. }));
    assert!(
        msg.contains("empty.csv") && msg.contains("header row"),
        "{msg}"
    );
}

#[test]
fn header_without_rows() {
    let (e, msg) = err("header_only.csv");
    assert!(matches!(e, DataError::NoDataRows { .. }), "{msg}");
}

#[test]
fn ragged_row_names_line_and_counts() {
    let (e, msg) = err("ragged.csv");
    assert_eq!(
        e,
        DataError::RaggedRow {
            origin: fixture("ragged.csv").display().to_string(),
            line: 3,
            found: 2,
            expected: 3
        }
    );
    assert!(msg.contains("line 3") && msg.contains("2 fields"), "{msg}");
}

#[test]
fn non_numeric_cell_names_line_column_and_value() {
    let (e, msg) = err("non_numeric.csv");
    assert!(
        matches!(
            e,
            DataError::NonNumeric {
                line: 3,
                column: 2,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(
        msg.contains("line 3, column 2 (`weight_g`)") && msg.contains("`heavy`"),
        "{msg}"
    );
    let (e, msg) = err("decimal_comma.csv");
    assert!(
        matches!(
            e,
            DataError::NonNumeric {
                line: 3,
                column: 1,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(
        msg.contains("`58,5`") && msg.contains("decimal point"),
        "{msg}"
    );
}

#[test]
fn nan_and_infinite_values_rejected() {
    let (e, msg) = err("nan.csv");
    assert!(
        matches!(
            e,
            DataError::NonFinite {
                line: 3,
                column: 2,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(msg.contains("NaN"), "{msg}");
    let (e, _) = err("infinite.csv");
    assert!(
        matches!(
            e,
            DataError::NonFinite {
                line: 2,
                column: 2,
                ..
            }
        ),
        "{e:?}"
    );
}

#[test]
fn missing_label_column_lists_columns_and_option() {
    let (e, msg) = err("no_label.csv");
    assert!(matches!(e, DataError::MissingLabelColumn { .. }));
    assert!(
        msg.contains("`label`")
            && msg.contains("width_mm, weight_g, fruit")
            && msg.contains("--label-column"),
        "{msg}"
    );
    let ds = load_csv(
        &fixture("no_label.csv"),
        &CsvOptions {
            label_column: "fruit".into(),
            ignore_columns: vec![],
        },
    )
    .unwrap();
    assert_eq!(ds.class_names, ["apple", "pear"]);
}

#[test]
fn duplicate_column_names() {
    let (e, msg) = err("duplicate_columns.csv");
    assert!(
        matches!(
            e,
            DataError::DuplicateColumn {
                first: 1,
                second: 3,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(msg.contains("`width_mm` appears twice"), "{msg}");
}

#[test]
fn unknown_ignore_column() {
    let e = load_csv(
        &fixture("good_crlf_bom.csv"),
        &CsvOptions {
            label_column: "label".into(),
            ignore_columns: vec!["serial".into()],
        },
    )
    .unwrap_err();
    let msg = e.to_string();
    assert!(matches!(e, DataError::UnknownIgnoreColumn { .. }));
    assert!(
        msg.contains("`serial`") && msg.contains("sample_id"),
        "{msg}"
    );
}

#[test]
fn single_class() {
    let (e, msg) = err("single_class.csv");
    assert!(matches!(e, DataError::SingleClass { .. }));
    assert!(
        msg.contains("`pear`") && msg.contains("two classes"),
        "{msg}"
    );
}

#[test]
fn empty_label_and_bad_encoding_and_bad_quote() {
    let (e, _) = err("empty_label.csv");
    assert!(
        matches!(
            e,
            DataError::EmptyLabel {
                line: 3,
                column: 3,
                ..
            }
        ),
        "{e:?}"
    );
    let (e, msg) = err("not_utf8.csv");
    assert!(matches!(e, DataError::NotUtf8 { line: 3, .. }), "{e:?}");
    assert!(msg.contains("UTF-8"), "{msg}");
    // An unterminated quote swallows the rest of the file into one field: an error on line 3.
    let (e, msg) = err("bad_quote.csv");
    assert!(msg.contains("line 3"), "{e:?}");
}

#[test]
fn parse_text_without_files() {
    let ds = parse_csv_text("a,label\n1,x\n2,y\n", "inline", &CsvOptions::default()).unwrap();
    assert_eq!(ds.name, "inline");
    assert_eq!(ds.x, array![[1.0], [2.0]]);
    let e = parse_csv_text(
        "a,label\n1,x\n",
        "inline",
        &CsvOptions {
            label_column: "label".into(),
            ignore_columns: vec!["a".into()],
        },
    )
    .unwrap_err();
    assert!(matches!(e, DataError::NoFeatures { .. }));
}

#[test]
fn split_errors() {
    // The good file has an id column: loaded with defaults it is a feature, which is fine here.
    let ds = load("good_crlf_bom.csv").unwrap();
    for bad in [0.0, 1.0, -0.2, f64::NAN] {
        assert!(matches!(
            stratified_split(&ds, bad, 1),
            Err(DataError::InvalidTestFraction { .. })
        ));
    }
    // Three class names but only two samples: fewer training samples than classes.
    let tiny = Dataset::new(
        "tiny",
        vec!["f".into()],
        vec!["a".into(), "b".into(), "c".into()],
        array![[0.0], [1.0]],
        vec![0, 1],
    )
    .unwrap();
    let e = stratified_split(&tiny, 0.3, 1).unwrap_err();
    assert!(
        matches!(
            e,
            DataError::TooFewTrainingSamples {
                train: 2,
                classes: 3,
                ..
            }
        ),
        "{e:?}"
    );
    assert!(e.to_string().contains("at least one sample per class"));
    // A class absent from the data although named.
    let gap = Dataset::new(
        "gap",
        vec!["f".into()],
        vec!["a".into(), "b".into(), "c".into()],
        array![[0.0], [1.0], [2.0], [3.0], [4.0], [5.0]],
        vec![0, 0, 0, 1, 1, 1],
    )
    .unwrap();
    assert!(matches!(
        stratified_split(&gap, 0.3, 1),
        Err(DataError::EmptyClass { .. })
    ));
    // One sample per class: nothing left to test on.
    let one_each = Dataset::new(
        "one_each",
        vec!["f".into()],
        vec!["a".into(), "b".into()],
        array![[0.0], [1.0]],
        vec![0, 1],
    )
    .unwrap();
    assert!(matches!(
        stratified_split(&one_each, 0.3, 1),
        Err(DataError::EmptyTestSplit { .. })
    ));
    assert!(matches!(
        stratified_kfold(&one_each, 2, 1),
        Err(DataError::ClassTooSmallForFolds { .. })
    ));
}

#[test]
fn every_class_in_train_and_in_proportion_on_shipped_data() {
    // Class counts from datasets/PROVENANCE.md; 30 % of each class (rounded) goes to test.
    for name in ["iris", "wine", "digits"] {
        let ds = Dataset::builtin(name).unwrap();
        let (tr, te) = stratified_split(&ds, 0.3, 1).unwrap();
        for ((&n, &a), &b) in ds
            .class_counts()
            .iter()
            .zip(&tr.class_counts())
            .zip(&te.class_counts())
        {
            assert_eq!(a + b, n);
            assert_eq!(b, (0.3 * n as f64).round() as usize);
            assert!(a > 0);
        }
    }
}
