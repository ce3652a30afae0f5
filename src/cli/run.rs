//! `hardmax run` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct RunArgs {}

pub fn run(_args: RunArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax run` is not available in this build yet")
}
