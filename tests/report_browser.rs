//! The rendered report in a real browser: Debian's chromium, headless. Renders the invented
//! fixture (tests/data/results_fixture), then
//! - dumps the DOM with console logging on stderr and checks that the page printed no console
//!   message at all (the report has no scripts, so any message is an error) and that every
//!   figure holds an SVG with drawing elements and text;
//! - takes a screenshot and checks it is a PNG of the requested size that is far from blank
//!   (several times the size of a screenshot of an empty page taken the same way).
//!
//! Without chromium the test prints that it skipped and passes, unless `HARDMAX_CI` is set
//! (CI installs chromium, so there it must run).

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 3000;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/results_fixture")
        .join(name)
}

fn find_chromium() -> Option<&'static str> {
    ["chromium", "chromium-browser"].into_iter().find(|name| {
        Command::new(name)
            .arg("--version")
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()
            .map(|s| s.success())
            .unwrap_or(false)
    })
}

/// What a chromium run printed.
struct Output {
    ok: bool,
    stdout: String,
    stderr: String,
}

/// Run headless chromium with a fresh profile (`profile`, also holding its captured output:
/// files, not pipes, so a large DOM dump cannot block it) and the given extra arguments; kill
/// it (our own child, by handle) if it takes longer than two minutes.
fn chromium(bin: &str, profile: &Path, extra: &[String], url: &str) -> Output {
    let out_path = profile.join("stdout.txt");
    let err_path = profile.join("stderr.txt");
    let mut child = Command::new(bin)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--hide-scrollbars",
        ])
        .arg(format!("--user-data-dir={}", profile.join("ud").display()))
        .args(extra)
        .arg(url)
        .stdin(Stdio::null())
        .stdout(fs::File::create(&out_path).unwrap())
        .stderr(fs::File::create(&err_path).unwrap())
        .spawn()
        .expect("start chromium");
    let start = Instant::now();
    let status = loop {
        match child.try_wait().expect("wait for chromium") {
            Some(s) => break s,
            None if start.elapsed() > Duration::from_secs(120) => {
                let _ = child.kill();
                panic!("chromium did not finish within 120 s");
            }
            None => std::thread::sleep(Duration::from_millis(100)),
        }
    };
    Output {
        ok: status.success(),
        stdout: fs::read_to_string(&out_path).unwrap_or_default(),
        stderr: fs::read_to_string(&err_path).unwrap_or_default(),
    }
}

fn file_url(p: &Path) -> String {
    format!("file://{}", p.display())
}

/// Width and height from a PNG's IHDR chunk (PNG specification, ISO/IEC 15948, section 11.2.2).
fn png_size(bytes: &[u8]) -> (u32, u32) {
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n", "not a PNG");
    assert_eq!(&bytes[12..16], b"IHDR");
    let w = u32::from_be_bytes(bytes[16..20].try_into().unwrap());
    let h = u32::from_be_bytes(bytes[20..24].try_into().unwrap());
    (w, h)
}

#[test]
fn report_loads_cleanly_in_headless_chromium() {
    let Some(bin) = find_chromium() else {
        if std::env::var_os("HARDMAX_CI").is_some() {
            panic!("chromium is not installed but HARDMAX_CI is set: CI must run the browser test");
        }
        eprintln!(
            "report_browser: chromium not found, skipped (install it: apt-get install chromium)"
        );
        return;
    };

    let dir = tempfile::tempdir().unwrap();
    for e in fs::read_dir(fixture("complete")).unwrap() {
        let p = e.unwrap().path();
        if p.is_file() {
            fs::copy(&p, dir.path().join(p.file_name().unwrap())).unwrap();
        }
    }
    hardmax::report::add_transfer(
        dir.path(),
        &fixture("transfer_wta.csv"),
        &hardmax::report::TransferMeta {
            x_label: "input current of output 0".into(),
            x_unit: "A".into(),
        },
    )
    .unwrap();
    let summary = hardmax::report::render(dir.path()).unwrap();
    let url = file_url(&summary.report);

    // 1. DOM dump with console messages on stderr.
    let profile = tempfile::tempdir().unwrap();
    let out = chromium(
        bin,
        profile.path(),
        &[
            "--enable-logging=stderr".into(),
            "--v=0".into(),
            "--dump-dom".into(),
        ],
        &url,
    );
    assert!(out.ok, "chromium failed: {}", out.stderr);
    let dom = out.stdout;
    let console: Vec<&str> = out
        .stderr
        .lines()
        .filter(|l| l.contains("CONSOLE"))
        .collect();
    assert!(console.is_empty(), "console messages: {console:#?}");
    assert!(
        dom.contains("fixture-iris-bias-bits"),
        "report did not load: {dom:.300}"
    );
    assert!(dom.contains(r#"id="caution""#));

    // Every figure is present and holds a drawn SVG.
    let figures: Vec<&str> = dom.split("<figure").skip(1).collect();
    assert_eq!(figures.len(), summary.plots.len(), "figures in the DOM");
    for (i, fig) in figures.iter().enumerate() {
        let fig = fig.split("</figure>").next().unwrap();
        let svg = fig
            .split("<svg")
            .nth(1)
            .unwrap_or_else(|| panic!("figure {} has no <svg>", i + 1));
        let svg = svg.split("</svg>").next().unwrap();
        let drawing = [
            "<rect",
            "<polyline",
            "<polygon",
            "<circle",
            "<line",
            "<path",
        ]
        .iter()
        .map(|t| svg.matches(t).count())
        .sum::<usize>();
        assert!(
            drawing >= 5,
            "figure {} has {drawing} drawing elements",
            i + 1
        );
        assert!(
            svg.matches("<text").count() >= 3,
            "figure {} has no labels",
            i + 1
        );
    }

    // 2. Screenshot of the report and, for scale, of an empty page.
    let shot = dir.path().join("report.png");
    let profile = tempfile::tempdir().unwrap();
    let size = format!("--window-size={WIDTH},{HEIGHT}");
    let out = chromium(
        bin,
        profile.path(),
        &[format!("--screenshot={}", shot.display()), size.clone()],
        &url,
    );
    assert!(out.ok, "chromium failed: {}", out.stderr);
    let png = fs::read(&shot).unwrap();
    assert_eq!(png_size(&png), (WIDTH, HEIGHT));

    let blank_html = dir.path().join("blank.html");
    fs::write(&blank_html, "<!DOCTYPE html><html><body></body></html>").unwrap();
    let blank = dir.path().join("blank.png");
    let profile = tempfile::tempdir().unwrap();
    let out = chromium(
        bin,
        profile.path(),
        &[format!("--screenshot={}", blank.display()), size],
        &file_url(&blank_html),
    );
    assert!(out.ok, "chromium failed: {}", out.stderr);
    let blank_len = fs::read(&blank).unwrap().len();
    assert!(
        png.len() > 4 * blank_len,
        "screenshot looks empty: {} bytes vs {blank_len} for a blank page",
        png.len()
    );
}
