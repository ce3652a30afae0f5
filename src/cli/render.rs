//! `hardmax render` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct RenderArgs {}

pub fn run(_args: RenderArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax render` is not available in this build yet")
}
