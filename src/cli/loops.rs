use std::path::Path;
use std::process::ExitCode;

pub fn run(_network: &Path, _iterations: usize, _json: bool) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`loops` is being built")
}
