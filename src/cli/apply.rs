use std::path::Path;
use std::process::ExitCode;

pub fn run(
    _network: &Path,
    _coefficients: &Path,
    _out: &Path,
    _force: bool,
) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`apply` is being built")
}
