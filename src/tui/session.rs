//! Opening the files a workbench works on: real files, a new sheet, or the bundled demo copied to a
//! scratch folder.

use std::path::{Path, PathBuf};

use super::app::Session;
use crate::fieldtest::{FieldSheet, SheetError, load_sheet};
use crate::network::file::{NetworkFileError, parse_network};
use crate::storage::{self, WriteError};

/// Why a session could not be opened.
#[derive(Debug, thiserror::Error)]
pub enum OpenError {
    #[error("cannot read {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{0}")]
    Network(#[from] NetworkFileError),
    #[error("{0}")]
    Sheet(#[from] SheetError),
    #[error("{0}")]
    Write(#[from] WriteError),
    #[error("{path} already exists; `roughcal open` works on an existing sheet")]
    SheetExists { path: PathBuf },
    #[error("cannot make the demo folder {path}: {source}")]
    Scratch {
        path: PathBuf,
        source: std::io::Error,
    },
}

fn read_network(path: &Path) -> Result<(String, crate::network::Network), OpenError> {
    let text = std::fs::read_to_string(path).map_err(|source| OpenError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let loaded = parse_network(&text, &path.display().to_string())?;
    Ok((text, loaded.network))
}

/// Opens an existing network and sheet; the sheet's first state is kept as `SHEET.orig` on the first
/// edit.
pub fn open_files(network: &Path, sheet: &Path) -> Result<Session, OpenError> {
    let (network_text, net) = read_network(network)?;
    let sheet_data = load_sheet(sheet)?;
    Ok(Session {
        network_path: network.to_path_buf(),
        network_text,
        network: net,
        sheet_path: sheet.to_path_buf(),
        sheet: sheet_data,
        scratch_folder: None,
        keep_original: true,
    })
}

/// Starts a new sheet from the template in the network's units; refuses if `sheet` exists.
pub fn new_sheet(network: &Path, sheet: &Path) -> Result<Session, OpenError> {
    if sheet.exists() {
        return Err(OpenError::SheetExists {
            path: sheet.to_path_buf(),
        });
    }
    let (network_text, net) = read_network(network)?;
    let mut empty = FieldSheet::empty(net.units);
    empty.set_file_name(&sheet.display().to_string());
    storage::write_new(sheet, empty.to_csv_string().as_bytes(), false)?;
    Ok(Session {
        network_path: network.to_path_buf(),
        network_text,
        network: net,
        sheet_path: sheet.to_path_buf(),
        sheet: empty,
        scratch_folder: None,
        keep_original: false,
    })
}

/// The bundled demo, copied into `folder` (created if needed) and opened there.
pub fn demo_in(folder: &Path) -> Result<Session, OpenError> {
    std::fs::create_dir_all(folder).map_err(|source| OpenError::Scratch {
        path: folder.to_path_buf(),
        source,
    })?;
    let network = folder.join(super::demo::NETWORK_FILE_NAME);
    let sheet = folder.join(super::demo::SHEET_FILE_NAME);
    storage::write_atomic(&network, super::demo::NETWORK.as_bytes())?;
    storage::write_atomic(&sheet, super::demo::SHEET.as_bytes())?;
    let mut session = open_files(&network, &sheet)?;
    session.scratch_folder = Some(folder.to_path_buf());
    session.keep_original = false;
    Ok(session)
}

/// The demo's scratch folder for this process: `<temp>/roughcal-demo-<pid>`.
pub fn demo_folder() -> PathBuf {
    std::env::temp_dir().join(format!("roughcal-demo-{}", std::process::id()))
}
