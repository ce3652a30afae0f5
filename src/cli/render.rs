//! `hardmax render` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct RenderArgs {}

pub fn run(_args: RenderArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax render` is not available in this build yet")
}

/// Render the plots and report of a results folder (placeholder until the report lands).
pub fn render_folder(_dir: &std::path::Path) -> anyhow::Result<()> {
    Ok(())
}
