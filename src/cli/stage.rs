//! `hardmax stage` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct StageArgs {}

pub fn run(_args: StageArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax stage` is not available in this build yet")
}
