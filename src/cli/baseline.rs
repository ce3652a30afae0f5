//! `hardmax baseline` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct BaselineArgs {}

pub fn run(_args: BaselineArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax baseline` is not available in this build yet")
}
