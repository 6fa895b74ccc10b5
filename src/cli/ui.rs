use std::path::Path;
use std::process::ExitCode;

pub fn run_demo() -> anyhow::Result<ExitCode> {
    anyhow::bail!("the workbench is being built")
}

pub fn run_open(_network: &Path, _sheet: &Path) -> anyhow::Result<ExitCode> {
    anyhow::bail!("the workbench is being built")
}

pub fn run_new(_network: &Path, _sheet: &Path) -> anyhow::Result<ExitCode> {
    anyhow::bail!("the workbench is being built")
}
