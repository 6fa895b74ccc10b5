use std::path::PathBuf;
use std::process::ExitCode;

use super::FitTarget;

#[allow(dead_code)]
pub struct Args {
    pub network: PathBuf,
    pub sheet: PathBuf,
    pub out: Option<PathBuf>,
    pub force: bool,
    pub fit: FitTarget,
    pub gauge_sd: Option<f64>,
    pub prior_sd: Option<f64>,
    pub within: Option<Vec<f64>>,
    pub max_iterations: u64,
    pub json: bool,
}

pub fn run(_args: Args) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`calibrate` is being built")
}
