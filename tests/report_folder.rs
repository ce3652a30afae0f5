//! Reading results folders: the invented fixture in tests/data/results_fixture (see its README)
//! and broken copies of it. The expected values are read straight from the fixture files.

use std::fs;
use std::path::{Path, PathBuf};

use hardmax::report::{self, Predicted, ReportError, ResultsFolder, RunStatus};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/results_fixture")
        .join(name)
}

/// A scratch copy of a fixture folder.
fn copy_of(name: &str) -> tempfile::TempDir {
    let tmp = tempfile::tempdir().unwrap();
    for e in fs::read_dir(fixture(name)).unwrap() {
        let p = e.unwrap().path();
        if p.is_file() {
            fs::copy(&p, tmp.path().join(p.file_name().unwrap())).unwrap();
        }
    }
    tmp
}

fn edit(dir: &Path, file: &str, f: impl FnOnce(String) -> String) {
    let p = dir.join(file);
    let text = fs::read_to_string(&p).unwrap();
    fs::write(&p, f(text)).unwrap();
}

#[test]
fn reads_the_complete_fixture() {
    let f = ResultsFolder::read(&fixture("complete")).unwrap();
    assert_eq!(f.manifest.status, RunStatus::Complete);
    assert_eq!(f.manifest.sweep.parameters.len(), 2);
    assert_eq!(f.points.rows.len(), 6);
    assert_eq!(f.chip_rows(), 6 * 20);
    assert!(!f.is_partial());
    // Point 3 of points.csv: bias 1e-08 A, 6 bits (fixture file, line 5).
    let p3 = f.point(3).unwrap();
    assert_eq!(p3.line, 5);
    assert_eq!(p3.params, vec![1e-8, 6.0]);
    assert_eq!(p3.chips, 20);
    // The per-point mean equals the mean of that point's chips in chips.csv (kept as counts of
    // each accuracy value: 20 chips).
    let accs = &f.chips_of(3).unwrap().accuracies;
    assert_eq!(accs.total(), 20);
    let mean = accs.summary().unwrap().mean;
    approx::assert_relative_eq!(p3.acc_mean.unwrap(), mean, max_relative = 1e-12);
    // Every decision of a point is in confusion.csv: 20 chips x 45 test samples.
    let total: u64 = f.confusion_of(3).map(|c| c.count).sum();
    assert_eq!(total, 20 * 45);
    assert!(f
        .confusion
        .iter()
        .any(|c| c.predicted == Predicted::NonConverged));
}

#[test]
fn partial_fixture_is_marked_and_keeps_finished_points_only() {
    let f = ResultsFolder::read(&fixture("partial")).unwrap();
    assert_eq!(f.manifest.status, RunStatus::Partial);
    assert!(f.is_partial());
    assert_eq!(f.points.rows.len(), 4);
    assert!(f.point(4).is_none());
    // chips.csv holds 7 chips of the unfinished point 4; they are read but belong to no row.
    assert_eq!(f.chips_of(4).map_or(0, |c| c.rows), 7);
}

#[test]
fn missing_files_are_named() {
    for file in ["manifest.json", "points.csv", "chips.csv", "confusion.csv"] {
        let d = copy_of("complete");
        fs::remove_file(d.path().join(file)).unwrap();
        let e = ResultsFolder::read(d.path()).unwrap_err();
        assert!(
            matches!(e, ReportError::MissingFile { .. }),
            "{file}: {e:?}"
        );
        assert!(e.to_string().contains(file), "{e}");
    }
    let e = ResultsFolder::read(Path::new("/nonexistent-hardmax-results")).unwrap_err();
    assert!(matches!(e, ReportError::NotAFolder { .. }));
}

#[test]
fn wrong_format_version_is_named() {
    let d = copy_of("complete");
    edit(d.path(), "manifest.json", |t| {
        t.replace("\"format_version\": 1", "\"format_version\": 2")
    });
    let e = ResultsFolder::read(d.path()).unwrap_err();
    assert!(matches!(e, ReportError::FormatVersion { .. }), "{e:?}");
    let msg = e.to_string();
    assert!(msg.contains("format_version 2"), "{msg}");
    assert!(msg.contains("version 1"), "{msg}");
    assert!(
        msg.contains("0.1.0"),
        "names the tool version that wrote it: {msg}"
    );
}

#[test]
fn manifest_errors_name_key_line_and_column() {
    let d = copy_of("complete");
    edit(d.path(), "manifest.json", |t| t.replace("\"seed\": 7,", ""));
    let msg = ResultsFolder::read(d.path()).unwrap_err().to_string();
    assert!(msg.contains("seed") && msg.contains("line"), "{msg}");

    let d = copy_of("complete");
    edit(d.path(), "manifest.json", |t| t.replacen('{', "{ oops", 1));
    let e = ResultsFolder::read(d.path()).unwrap_err();
    assert!(
        matches!(e, ReportError::ManifestJson { line: 1, .. }),
        "{e:?}"
    );

    let d = copy_of("complete");
    edit(d.path(), "manifest.json", |t| {
        t.replace("\"status\": \"complete\"", "\"status\": \"partial\"")
            .replace("\"points_done\": 6", "\"points_done\": 9")
    });
    let msg = ResultsFolder::read(d.path()).unwrap_err().to_string();
    assert!(msg.contains("points_done"), "{msg}");
}

#[test]
fn bad_cells_name_file_line_and_column() {
    let d = copy_of("complete");
    // Line 3 is point 1; column 6 is acc_mean (point, 2 parameters, chips, samples, acc_mean).
    edit(d.path(), "points.csv", |t| {
        let mut lines: Vec<String> = t.lines().map(String::from).collect();
        let mut cells: Vec<String> = lines[2].split(',').map(String::from).collect();
        cells[5] = "abc".into();
        lines[2] = cells.join(",");
        lines.join("\n") + "\n"
    });
    let e = ResultsFolder::read(d.path()).unwrap_err();
    match &e {
        ReportError::Cell {
            line,
            column,
            column_name,
            ..
        } => {
            assert_eq!((*line, *column, column_name.as_str()), (3, 6, "acc_mean"));
        }
        other => panic!("{other:?}"),
    }
    assert!(e.to_string().contains("points.csv"));

    // A share outside [0, 1].
    let d = copy_of("complete");
    edit(d.path(), "chips.csv", |t| {
        let mut lines: Vec<String> = t.lines().map(String::from).collect();
        let mut cells: Vec<String> = lines[1].split(',').map(String::from).collect();
        cells[4] = "1.5".into();
        lines[1] = cells.join(",");
        lines.join("\n") + "\n"
    });
    let msg = ResultsFolder::read(d.path()).unwrap_err().to_string();
    assert!(
        msg.contains("chips.csv") && msg.contains("line 2") && msg.contains("[0, 1]"),
        "{msg}"
    );
}

#[test]
fn missing_columns_and_short_rows_are_named() {
    let d = copy_of("complete");
    edit(d.path(), "points.csv", |t| {
        t.replacen(",yield,", ",yield_x,", 1)
    });
    let e = ResultsFolder::read(d.path()).unwrap_err();
    assert!(
        matches!(&e, ReportError::MissingColumn { column, .. } if column == "yield"),
        "{e:?}"
    );

    let d = copy_of("complete");
    edit(d.path(), "points.csv", |t| {
        t.replacen("competition.bias_current", "bias", 1)
    });
    let msg = ResultsFolder::read(d.path()).unwrap_err().to_string();
    assert!(
        msg.contains("competition.bias_current") && msg.contains("sweep parameter 1"),
        "{msg}"
    );

    let d = copy_of("complete");
    edit(d.path(), "confusion.csv", |t| t + "2,setosa\n");
    let e = ResultsFolder::read(d.path()).unwrap_err();
    assert!(matches!(e, ReportError::Line { .. }), "{e:?}");
    assert!(e.to_string().contains("confusion.csv"));

    let d = copy_of("complete");
    edit(d.path(), "confusion.csv", |t| t + "2,daisy,setosa,3\n");
    let msg = ResultsFolder::read(d.path()).unwrap_err().to_string();
    assert!(
        msg.contains("daisy") && msg.contains("setosa, versicolor, virginica"),
        "{msg}"
    );
}

#[test]
fn unknown_focus_point_lists_the_finished_ones() {
    let d = copy_of("partial");
    let e = report::render_with(d.path(), &report::RenderOptions { point: Some(5) }).unwrap_err();
    assert!(
        matches!(e, ReportError::UnknownPoint { point: 5, .. }),
        "{e:?}"
    );
    assert!(e.to_string().contains("0, 1, 2, 3"), "{e}");
}

#[test]
fn transfer_curve_is_read_and_checked() {
    let t = report::TransferCurve::read(&fixture("transfer_wta.csv")).unwrap();
    assert_eq!(t.outputs.len(), 3);
    assert_eq!(t.x.len(), 41);
    // Shares of the fixture sum to one at every x (they are normalised by construction).
    for i in 0..t.x.len() {
        let s: f64 = t.shares.iter().map(|s| s[i]).sum();
        approx::assert_relative_eq!(s, 1.0, epsilon = 1e-12);
    }
    let bad =
        report::TransferCurve::parse("x,out_0,out_1,share_0\n1,2,3,0.5\n", Path::new("t.csv"))
            .unwrap_err();
    assert!(bad.to_string().contains("share_1"), "{bad}");
}
