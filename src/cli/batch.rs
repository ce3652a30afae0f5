//! `hardmax batch` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct BatchArgs {}

pub fn run(_args: BatchArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax batch` is not available in this build yet")
}
