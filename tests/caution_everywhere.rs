//! Every command that prints a caution prints the same full text, the one constant
//! `hardmax::CAUTION` (project rule: every report carries it; DEVELOPERS.md model notes §8):
//! `run`, `batch`, `stage` (table, and `--sweep` with the CSV on stdout), `render`, `baseline`,
//! and the HTML report. Before this test, `baseline` and `render` printed shorter versions and
//! the report had its own wording.

use std::path::Path;

use assert_cmd::Command;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

/// stdout and stderr of a successful command, concatenated.
fn output_of(c: &mut Command) -> String {
    let out = c.assert().success();
    let o = out.get_output();
    format!(
        "{}\n{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

fn assert_full_caution(what: &str, text: &str) {
    assert!(
        text.contains(hardmax::CAUTION),
        "{what}: the full caution `{}` is missing from\n{text}",
        hardmax::CAUTION
    );
}

/// HTML-escaped caution, as the report writes it (& < > " ' escaped).
fn html_escaped(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&#39;")
}

const TINY: &str = r#"
description = "iris, one point (caution test)"
[dataset]
name = "iris"
[population]
chips = 2
seed = 3
"#;

fn write_tiny(dir: &Path) -> std::path::PathBuf {
    let exps = dir.join("exps");
    std::fs::create_dir_all(&exps).unwrap();
    let p = exps.join("tiny.toml");
    std::fs::write(&p, TINY).unwrap();
    p
}

#[test]
fn run_render_report_and_batch_print_the_full_caution() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write_tiny(dir.path());
    let out = dir.path().join("out");
    let s = output_of(
        hardmax()
            .args(["run", "--threads", "1", "--out"])
            .arg(&out)
            .arg(&exp),
    );
    assert_full_caution("run", &s);
    let s = output_of(hardmax().arg("render").arg(&out));
    assert_full_caution("render", &s);
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let escaped = html_escaped(hardmax::CAUTION);
    assert!(
        html.contains(&escaped) || html.contains(hardmax::CAUTION),
        "report.html lacks the full caution"
    );
    // Failed decisions by kind reach the tables and the report (DEVELOPERS.md results folder).
    let points = std::fs::read_to_string(out.join("points.csv")).unwrap();
    assert!(
        points.lines().next().unwrap().contains(
            "failed_not_converged,failed_out_of_supply_compliance,failed_weight_stage,failed_noise"
        ),
        "{points}"
    );
    let chips = std::fs::read_to_string(out.join("chips.csv")).unwrap();
    assert!(
        chips.lines().next().unwrap().ends_with("failed_noise"),
        "{chips}"
    );
    assert!(
        html.contains("Failed decisions by kind, all points: not converged 0"),
        "report lacks the failure kinds"
    );
    let s = output_of(
        hardmax()
            .args(["batch", "--quiet", "--no-report", "--out-root"])
            .arg(dir.path().join("batch"))
            .arg(dir.path().join("exps")),
    );
    assert_full_caution("batch", &s);
}

#[test]
fn stage_and_baseline_print_the_full_caution() {
    let s = output_of(hardmax().args([
        "stage",
        "--inputs",
        "1nA,1.2nA,0.9nA",
        "--bias",
        "2nA",
        "--gain",
        "10",
    ]));
    assert_full_caution("stage (table)", &s);
    let s = output_of(hardmax().args([
        "stage",
        "--inputs",
        "1nA,1.2nA,0.9nA",
        "--bias",
        "2nA",
        "--gain",
        "10",
        "--sweep",
        "input:0",
        "--from",
        "0.5nA",
        "--to",
        "2nA",
        "--points",
        "3",
    ]));
    assert_full_caution("stage --sweep (CSV on stdout)", &s);
    let s = output_of(hardmax().args(["baseline", "--dataset", "iris"]));
    assert_full_caution("baseline", &s);
}
