//! The layering invariant, enforced: the numerical core crate depends on no command-line,
//! progress-bar or plotting crate, directly or through another dependency, and not on anyhow
//! itself (DEVELOPERS.md, invariant 1). Reads `cargo tree` of the crates.
//!
//! anyhow does appear below the core, through linfa-logistic's optimiser (argmin); the test pins
//! that as the only way in, so no code of ours can start using it unnoticed.

use std::process::Command;

const FORBIDDEN_IN_CORE: &[&str] = &["clap", "indicatif", "plotters"];
/// The only packages allowed on a path from our library crates to anyhow: linfa-logistic's
/// optimiser.
const ANYHOW_VIA: &[&str] = &["anyhow", "argmin", "argmin-math", "linfa-logistic"];

fn assert_anyhow_only_via_optimiser(package: &str) {
    for name in paths_to(package, "anyhow") {
        assert!(
            ANYHOW_VIA.contains(&name.as_str()) || name.starts_with("hardmax"),
            "{package} reaches anyhow through {name}: library crates use typed errors (thiserror)"
        );
    }
}

fn tree_of(package: &str) -> Vec<String> {
    tree_args(package, &[])
}

/// Packages on the paths from `package` down to `dep` (`cargo tree --invert`).
fn paths_to(package: &str, dep: &str) -> Vec<String> {
    tree_args(package, &["-i", dep])
}

fn tree_args(package: &str, extra: &[&str]) -> Vec<String> {
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_string());
    let out = Command::new(cargo)
        .args([
            "tree",
            "--offline",
            "-p",
            package,
            "-e",
            "normal",
            "--prefix",
            "none",
            "--format",
            "{p}",
        ])
        .args(extra)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("cargo runs");
    assert!(
        out.status.success(),
        "cargo tree -p {package} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .filter_map(|l| l.split_whitespace().next().map(str::to_string))
        .collect()
}

#[test]
fn core_crate_has_no_io_or_cli_dependencies() {
    let names = tree_of("hardmax-core");
    assert!(
        names.iter().any(|n| n == "ndarray"),
        "sanity: the core's tree lists ndarray"
    );
    for bad in FORBIDDEN_IN_CORE {
        assert!(
            !names.iter().any(|n| n == bad),
            "hardmax-core depends on {bad} (directly or indirectly): move that code to the edge"
        );
    }
    assert_anyhow_only_via_optimiser("hardmax-core");
}

#[test]
fn report_crate_has_no_cli_dependencies() {
    let names = tree_of("hardmax-report");
    assert!(
        names.iter().any(|n| n == "plotters"),
        "sanity: report draws with plotters"
    );
    for bad in ["clap", "indicatif"] {
        assert!(
            !names.iter().any(|n| n == bad),
            "hardmax-report depends on {bad}: command-line and progress code belong to the binary"
        );
    }
    assert_anyhow_only_via_optimiser("hardmax-report");
}
