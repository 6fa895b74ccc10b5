//! Opening the files a workbench works on: real files, a new sheet, or the bundled demo copied to a
//! scratch folder.

use std::path::{Path, PathBuf};

use crate::fieldtest::{FieldSheet, SheetError, load_sheet};
use crate::network::Network;
use crate::network::file::NetworkFileError;
use crate::storage::FileStamp;
use crate::storage::{self, WriteError};

/// The files being worked on.
#[derive(Debug, Clone)]
pub struct Session {
    pub network_path: PathBuf,
    /// The network file's text as last written, for preserving edits.
    pub network_text: String,
    pub network: Network,
    pub sheet_path: PathBuf,
    pub sheet: FieldSheet,
    /// For the demo: the scratch folder holding the copies.
    pub scratch_folder: Option<PathBuf>,
    /// Whether the sheet's first state is kept as `SHEET.orig` on the first save.
    pub keep_original: bool,
    /// What the sheet file on disk was when last read or written, and whether it may be written.
    pub sheet_file: FileState,
    /// The same for the network file.
    pub network_file: FileState,
    /// The sheet as last read from or written to disk: the common ancestor when another program's
    /// version has to be merged with ours.
    pub sheet_base: FieldSheet,
}

/// What the workbench knows about a file it works on.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FileState {
    /// The file cannot be written: edits are refused, nothing is ever written to it.
    pub read_only: bool,
    /// Size, modification time and hash of the file as last read or written (`None`: not known, e.g.
    /// a file that does not exist yet).
    pub stamp: Option<FileStamp>,
}

impl FileState {
    /// The state of the file at `path` as it is now.
    pub fn of(path: &std::path::Path) -> FileState {
        FileState {
            read_only: !crate::storage::is_writable(path),
            stamp: FileStamp::of(path).ok(),
        }
    }
}

/// A save that found the file on disk changed by someone else, and where our version went instead.
#[derive(Debug, Clone, PartialEq)]
pub struct Conflict {
    /// `SHEET.roughcal-unsaved.csv` (or the network's), with its stamp; `Err` when it could not be
    /// written either (the edits are then only in memory).
    pub side_file: Result<(PathBuf, Option<FileStamp>), String>,
}

/// Which file a save was for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SaveTarget {
    Sheet,
    Network,
}

/// Why a session could not be opened.
#[derive(Debug, thiserror::Error)]
pub enum OpenError {
    // Io errors are part of the message, not a `source`, and wrapped errors are transparent, so that an
    // error chain prints each cause once.
    #[error("cannot read {path}: {cause}")]
    Read {
        path: PathBuf,
        cause: std::io::Error,
    },
    #[error(transparent)]
    Network(#[from] NetworkFileError),
    #[error(transparent)]
    Sheet(#[from] SheetError),
    #[error(transparent)]
    Write(#[from] WriteError),
    #[error("{path} already exists; `roughcal open` works on an existing sheet")]
    SheetExists { path: PathBuf },
    #[error("cannot make the demo folder {path}: {cause}")]
    Scratch {
        path: PathBuf,
        cause: std::io::Error,
    },
}

fn read_network(path: &Path) -> Result<(String, crate::network::Network), OpenError> {
    match crate::network::read_network(path) {
        Ok(read) => Ok((read.text, read.loaded.network)),
        Err(NetworkFileError::Unreadable { source, .. }) => Err(OpenError::Read {
            path: path.to_path_buf(),
            cause: source,
        }),
        Err(error) => Err(error.into()),
    }
}

/// Opens an existing network and sheet; the sheet's first state is kept as `SHEET.orig` on the first
/// edit.
pub fn open_files(network: &Path, sheet: &Path) -> Result<Session, OpenError> {
    // Stamped before reading: a change in between makes the first save stop and ask, never overwrite.
    let network_file = FileState::of(network);
    let sheet_file = FileState::of(sheet);
    let (network_text, net) = read_network(network)?;
    let sheet_data = load_sheet(sheet)?;
    Ok(Session {
        network_path: network.to_path_buf(),
        network_text,
        network: net,
        sheet_path: sheet.to_path_buf(),
        sheet_base: sheet_data.clone(),
        sheet: sheet_data,
        scratch_folder: None,
        keep_original: true,
        sheet_file,
        network_file,
    })
}

/// Starts a new sheet from the template in the network's units; refuses if `sheet` exists.
pub fn new_sheet(network: &Path, sheet: &Path) -> Result<Session, OpenError> {
    if sheet.exists() {
        return Err(OpenError::SheetExists {
            path: sheet.to_path_buf(),
        });
    }
    let network_file = FileState::of(network);
    let (network_text, net) = read_network(network)?;
    let mut empty = FieldSheet::empty(net.units);
    empty.set_file_name(&sheet.display().to_string());
    storage::write_new(sheet, empty.to_csv_string().as_bytes(), false)?;
    Ok(Session {
        network_path: network.to_path_buf(),
        network_text,
        network: net,
        sheet_path: sheet.to_path_buf(),
        sheet_base: empty.clone(),
        sheet: empty,
        scratch_folder: None,
        keep_original: false,
        sheet_file: FileState::of(sheet),
        network_file,
    })
}

/// The bundled demo, copied into `folder` (created if needed) and opened there.
pub fn demo_in(folder: &Path) -> Result<Session, OpenError> {
    std::fs::create_dir_all(folder).map_err(|cause| OpenError::Scratch {
        path: folder.to_path_buf(),
        cause,
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

/// What became of the demo's scratch folder when the workbench closed.
#[derive(Debug)]
pub enum DemoCleanup {
    /// It held only the demo's own files and is gone.
    Removed,
    /// It holds files the user made there (exports): kept, with their names.
    Kept { folder: PathBuf, yours: Vec<String> },
    /// It could not be removed.
    Failed {
        folder: PathBuf,
        cause: std::io::Error,
    },
}

impl DemoCleanup {
    /// The line to print, if any: where the folder is and why it stays.
    pub fn message(&self) -> Option<String> {
        match self {
            Self::Removed => None,
            Self::Kept { folder, yours } => Some(format!(
                "the demo copy in {} stays: it holds what you made there ({}); remove the folder when \
                 you are done with it",
                folder.display(),
                yours.join(", ")
            )),
            Self::Failed { folder, cause } => Some(format!(
                "the demo copy in {} could not be removed ({cause}); remove it by hand",
                folder.display()
            )),
        }
    }
}

/// Removes the demo's scratch folder unless it holds something the user made (an export, say):
/// the demo network and sheet, the sheet's kept original and temporary files of a save are the demo's
/// own, anything else (an export, a side file of unsaved edits) is the user's.
pub fn clean_up_demo(folder: &Path) -> DemoCleanup {
    let network = super::demo::NETWORK_FILE_NAME;
    let sheet = super::demo::SHEET_FILE_NAME;
    let ours = |name: &str| {
        [network, sheet].iter().any(|own| {
            name == *own
                || name == format!("{own}.orig")
                || (name.starts_with(&format!(".{own}.")) && name.ends_with(".tmp"))
        })
    };
    let entries = match std::fs::read_dir(folder) {
        Ok(entries) => entries,
        Err(cause) if cause.kind() == std::io::ErrorKind::NotFound => return DemoCleanup::Removed,
        Err(cause) => {
            return DemoCleanup::Failed {
                folder: folder.to_path_buf(),
                cause,
            };
        }
    };
    let mut yours: Vec<String> = entries
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|name| !ours(name))
        .collect();
    if !yours.is_empty() {
        yours.sort();
        return DemoCleanup::Kept {
            folder: folder.to_path_buf(),
            yours,
        };
    }
    match std::fs::remove_dir_all(folder) {
        Ok(()) => DemoCleanup::Removed,
        Err(cause) => DemoCleanup::Failed {
            folder: folder.to_path_buf(),
            cause,
        },
    }
}
