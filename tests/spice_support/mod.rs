//! Shared by the ngspice cross-checks: whether ngspice is there (required under HARDMAX_CI), and
//! one batch run of a deck in a fresh folder.

use std::process::Command;

/// Whether `ngspice` runs; without it the check named `what` is skipped, except under
/// HARDMAX_CI, where CI must run it.
pub fn ngspice_available(what: &str) -> bool {
    let ok = Command::new("ngspice")
        .arg("--version")
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !ok {
        assert!(
            std::env::var_os("HARDMAX_CI").is_none(),
            "ngspice is not installed but HARDMAX_CI is set: CI must run this cross-check"
        );
        eprintln!("ngspice not on PATH: {what} skipped");
    }
    ok
}

/// Run the deck `text` as `NAME.cir` in batch mode in a temporary folder and return the text
/// of the `NAME.raw` it writes (the deck's `.control` block names that file).
#[allow(dead_code)]
pub fn run_ngspice(name: &str, text: &str) -> String {
    let tmp = tempfile::tempdir().unwrap();
    let cir = tmp.path().join(format!("{name}.cir"));
    std::fs::write(&cir, text).unwrap();
    let o = Command::new("ngspice")
        .current_dir(tmp.path())
        .args(["-b"])
        .arg(&cir)
        .output()
        .unwrap();
    assert!(
        o.status.success(),
        "ngspice failed: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    std::fs::read_to_string(tmp.path().join(format!("{name}.raw"))).unwrap()
}
