//! `hardmax resolve` (placeholder until its issue lands; it reports that it is not available yet).

use clap::Args;

#[derive(Debug, Args)]
pub struct ResolveArgs {}

pub fn run(_args: ResolveArgs) -> anyhow::Result<()> {
    anyhow::bail!("`hardmax resolve` is not available in this build yet")
}
