use std::path::Path;
use std::process::ExitCode;

pub fn run(
    _network: &Path,
    _condition: Option<&str>,
    _demands: &[String],
    _json: bool,
) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`solve` is being built")
}
