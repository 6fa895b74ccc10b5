//! Crash-safe writing: the one way roughcal writes any file (sheets, networks, exports).
//!
//! The bytes go to a temporary file in the target's own folder, are flushed and synced to disk, and the
//! temporary file is then renamed over the target (an atomic replacement on POSIX file systems), after
//! which the folder itself is synced so the rename survives a power cut. A reader, a crash or a pulled
//! plug therefore sees either the old file or the new one, never a mix or a truncation.

use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime};

/// Why a write did not happen; the target is untouched in every case.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    // The io error is part of the message, not a separate `source`, so that error chains print it once.
    #[error("{path}: cannot write a temporary file beside it: {cause}")]
    Temporary { path: PathBuf, cause: io::Error },
    #[error("{path}: writing failed, the previous file is kept: {cause}")]
    Write { path: PathBuf, cause: io::Error },
    #[error("{path}: cannot replace the file, the previous file is kept: {cause}")]
    Replace { path: PathBuf, cause: io::Error },
    #[error("{path}: already exists; refusing to overwrite it without --force")]
    Exists { path: PathBuf },
    #[error("{path}: cannot keep the file's mode or owner, the previous file is kept: {cause}")]
    Keep { path: PathBuf, cause: io::Error },
}

/// Writes `bytes` to `path` atomically (see the module documentation).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), WriteError> {
    write_atomic_with(path, |file| file.write_all(bytes))
}

/// As [`write_atomic`], with the content produced by `fill` writing into the temporary file. If `fill`
/// fails, the temporary file is removed and the target is left as it was.
pub fn write_atomic_with(
    path: &Path,
    fill: impl FnOnce(&mut File) -> io::Result<()>,
) -> Result<(), WriteError> {
    let (folder, file_name) = folder_and_name(path);
    let (temp_path, mut file) =
        create_temporary(&folder, &file_name).map_err(|cause| WriteError::Temporary {
            path: path.to_path_buf(),
            cause,
        })?;
    // The replacement takes the place of the old file with its mode and owner, never the defaults of
    // a new file: a sheet kept group-readable or owned by a service account stays so.
    if let Err(cause) = keep_mode_and_owner(path, &file) {
        drop(file);
        let _ = fs::remove_file(&temp_path);
        return Err(WriteError::Keep {
            path: path.to_path_buf(),
            cause,
        });
    }
    let written = fill(&mut file)
        .and_then(|()| file.flush())
        .and_then(|()| file.sync_all());
    drop(file);
    if let Err(source) = written {
        let _ = fs::remove_file(&temp_path);
        return Err(WriteError::Write {
            path: path.to_path_buf(),
            cause: source,
        });
    }
    if let Err(source) = fs::rename(&temp_path, path) {
        let _ = fs::remove_file(&temp_path);
        return Err(WriteError::Replace {
            path: path.to_path_buf(),
            cause: source,
        });
    }
    // Make the rename itself durable; a folder that cannot be opened for syncing (some platforms) is not
    // an error: the data is already safe in the renamed file.
    if let Ok(dir) = File::open(&folder) {
        let _ = dir.sync_all();
    }
    Ok(())
}

/// Gives `file` (the temporary replacement of `target`) the mode and owner of `target`, if it exists.
#[cfg(unix)]
fn keep_mode_and_owner(target: &Path, file: &File) -> io::Result<()> {
    use std::os::unix::fs::{MetadataExt, fchown};
    let Ok(meta) = fs::metadata(target) else {
        return Ok(());
    };
    let current = file.metadata()?;
    if current.uid() != meta.uid() || current.gid() != meta.gid() {
        fchown(file, Some(meta.uid()), Some(meta.gid()))?;
    }
    file.set_permissions(meta.permissions())
}

#[cfg(not(unix))]
fn keep_mode_and_owner(target: &Path, file: &File) -> io::Result<()> {
    match fs::metadata(target) {
        Ok(meta) => file.set_permissions(meta.permissions()),
        Err(_) => Ok(()),
    }
}

/// What a file on disk was when roughcal last read or wrote it: size, modification time and a hash of
/// its bytes. A save checks the file still matches before replacing it, so another program's change
/// is never overwritten unseen.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FileStamp {
    pub size: u64,
    pub modified: Option<SystemTime>,
    /// A 64-bit hash of the bytes (SipHash with fixed keys: it tells versions apart, it does not
    /// guard against anyone forging one).
    pub hash: u64,
}

impl FileStamp {
    /// The stamp of the file at `path` as it is now.
    pub fn of(path: &Path) -> io::Result<FileStamp> {
        let bytes = fs::read(path)?;
        let modified = fs::metadata(path)?.modified().ok();
        Ok(FileStamp::of_bytes(&bytes, modified))
    }

    /// The stamp of `bytes` read with modification time `modified`.
    pub fn of_bytes(bytes: &[u8], modified: Option<SystemTime>) -> FileStamp {
        use std::hash::{Hash, Hasher};
        let mut hasher = std::collections::hash_map::DefaultHasher::new();
        bytes.hash(&mut hasher);
        FileStamp {
            size: bytes.len() as u64,
            modified,
            hash: hasher.finish(),
        }
    }
}

/// Whether the file at `path` can be written by this process: it has a write permission bit and it
/// opens for writing (which changes nothing in it). A file that does not exist counts as writable.
pub fn is_writable(path: &Path) -> bool {
    match fs::metadata(path) {
        Ok(meta) if meta.permissions().readonly() => false,
        Ok(_) => OpenOptions::new().append(true).open(path).is_ok(),
        Err(_) => true,
    }
}

/// As [`write_atomic`], but refuses to replace an existing file unless `force`.
pub fn write_new(path: &Path, bytes: &[u8], force: bool) -> Result<(), WriteError> {
    if !force && path.exists() {
        return Err(WriteError::Exists {
            path: path.to_path_buf(),
        });
    }
    write_atomic(path, bytes)
}

/// The path of the kept original of `path`: `SHEET.csv` -> `SHEET.csv.orig`.
pub fn original_copy_path(path: &Path) -> PathBuf {
    let mut name = path.as_os_str().to_owned();
    name.push(".orig");
    PathBuf::from(name)
}

/// The side file that holds edits a save could not put into `path` (another program changed it):
/// `SHEET.csv` -> `SHEET.roughcal-unsaved.csv`, `net.toml` -> `net.roughcal-unsaved.toml`.
pub fn unsaved_copy_path(path: &Path) -> PathBuf {
    let stem = path
        .file_stem()
        .map_or_else(|| "roughcal".into(), |s| s.to_string_lossy().into_owned());
    let name = match path.extension() {
        Some(ext) => format!("{stem}.roughcal-unsaved.{}", ext.to_string_lossy()),
        None => format!("{stem}.roughcal-unsaved"),
    };
    path.with_file_name(name)
}

/// The first of [`unsaved_copy_path`], `STEM.roughcal-unsaved-2.EXT`, `-3`, ... that names nothing yet,
/// so a side file kept from an earlier conflict is never replaced by a later one.
pub fn free_unsaved_copy_path(path: &Path) -> PathBuf {
    let first = unsaved_copy_path(path);
    if !first.exists() {
        return first;
    }
    let stem = path
        .file_stem()
        .map_or_else(|| "roughcal".into(), |s| s.to_string_lossy().into_owned());
    (2u32..)
        .map(|n| {
            let name = match path.extension() {
                Some(ext) => format!("{stem}.roughcal-unsaved-{n}.{}", ext.to_string_lossy()),
                None => format!("{stem}.roughcal-unsaved-{n}"),
            };
            path.with_file_name(name)
        })
        .find(|candidate| !candidate.exists())
        .unwrap_or(first)
}

/// Gives `copy` the permissions of `original` (a side file holds the same readings, so it is no more
/// readable than the file it stands in for). Best effort: a copy that keeps the default mode is still
/// better than no copy.
pub fn copy_mode(original: &Path, copy: &Path) {
    if let Ok(meta) = fs::metadata(original) {
        let _ = fs::set_permissions(copy, meta.permissions());
    }
}

/// Keeps a copy of `path` as it is now in `path.orig`, unless one is already there (the first original
/// is the one worth keeping). Returns the copy's path.
pub fn keep_original(path: &Path) -> Result<PathBuf, WriteError> {
    let copy = original_copy_path(path);
    if copy.exists() || !path.exists() {
        return Ok(copy);
    }
    let bytes = fs::read(path).map_err(|cause| WriteError::Write {
        path: copy.clone(),
        cause,
    })?;
    write_atomic(&copy, &bytes)?;
    Ok(copy)
}

/// Age after which a temporary file of ours is taken to be left over from a save that was killed between
/// creating it and renaming it. A save takes well under a second, so an hour leaves a wide margin for a
/// second roughcal saving the same file.
pub const STALE_TEMPORARY_AGE: Duration = Duration::from_secs(3600);

/// Removes the temporary files that interrupted saves of `path` left beside it
/// (`.NAME.PID.N.tmp`, older than [`STALE_TEMPORARY_AGE`]) and returns the ones removed. The target itself
/// is never touched: an interrupted save left it as it was before that save. Unreadable folders and
/// files that cannot be removed are skipped; this is tidying, not a condition of working.
pub fn remove_stale_temporaries(path: &Path) -> Vec<PathBuf> {
    let (folder, file_name) = folder_and_name(path);
    let Ok(entries) = fs::read_dir(&folder) else {
        return Vec::new();
    };
    let now = SystemTime::now();
    let mut removed = Vec::new();
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if !is_temporary_of(&name, &file_name) {
            continue;
        }
        let old_enough = entry
            .metadata()
            .and_then(|m| m.modified())
            .ok()
            .and_then(|modified| now.duration_since(modified).ok())
            .is_some_and(|age| age >= STALE_TEMPORARY_AGE);
        if old_enough && fs::remove_file(entry.path()).is_ok() {
            removed.push(entry.path());
        }
    }
    removed.sort();
    removed
}

/// Whether `name` is one of [`create_temporary`]'s names for `file_name`: `.FILE.PID.ATTEMPT.tmp`.
fn is_temporary_of(name: &str, file_name: &str) -> bool {
    let Some(middle) = name
        .strip_prefix('.')
        .and_then(|rest| rest.strip_prefix(file_name))
        .and_then(|rest| rest.strip_prefix('.'))
        .and_then(|rest| rest.strip_suffix(".tmp"))
    else {
        return false;
    };
    let parts: Vec<&str> = middle.split('.').collect();
    parts.len() == 2
        && parts
            .iter()
            .all(|p| !p.is_empty() && p.bytes().all(|b| b.is_ascii_digit()))
}

/// The folder a file lives in (`.` for a bare name) and its file name.
fn folder_and_name(path: &Path) -> (PathBuf, String) {
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let file_name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "roughcal".to_string());
    (folder, file_name)
}

fn create_temporary(folder: &Path, file_name: &str) -> io::Result<(PathBuf, File)> {
    let pid = std::process::id();
    for attempt in 0..1000u32 {
        let candidate = folder.join(format!(".{file_name}.{pid}.{attempt}.tmp"));
        match OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&candidate)
        {
            Ok(file) => return Ok((candidate, file)),
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(e),
        }
    }
    Err(io::Error::new(
        io::ErrorKind::AlreadyExists,
        "no free temporary file name",
    ))
}

/// Today's UTC date as YYYY-MM-DD, for the run date of outputs. `SOURCE_DATE_EPOCH` (seconds, the
/// reproducible-builds convention) overrides the clock so a re-run can give the same bytes.
pub fn today_utc() -> String {
    let seconds = std::env::var("SOURCE_DATE_EPOCH")
        .ok()
        .and_then(|s| s.trim().parse::<i64>().ok())
        .unwrap_or_else(|| {
            SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| i64::try_from(d.as_secs()).unwrap_or(0))
        });
    crate::report::civil_date(seconds.div_euclid(86_400))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_old_temporaries_of_the_file_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("tue.csv");
        fs::write(&target, "kept").unwrap();
        let old = SystemTime::now() - STALE_TEMPORARY_AGE - Duration::from_secs(60);
        let make = |name: &str, modified: SystemTime| {
            let path = dir.path().join(name);
            let file = File::create(&path).unwrap();
            file.set_modified(modified).unwrap();
            path
        };
        let stale = make(".tue.csv.4242.0.tmp", old);
        let stale_too = make(".tue.csv.17.3.tmp", old);
        let fresh = make(".tue.csv.4243.0.tmp", SystemTime::now());
        let other_file = make(".wed.csv.4242.0.tmp", old);
        let not_ours = make(".tue.csv.backup.tmp", old);
        let removed = remove_stale_temporaries(&target);
        let mut expected = vec![stale.clone(), stale_too.clone()];
        expected.sort();
        assert_eq!(removed, expected);
        assert!(!stale.exists() && !stale_too.exists());
        assert!(fresh.exists() && other_file.exists() && not_ours.exists());
        assert_eq!(fs::read_to_string(&target).unwrap(), "kept");
        // A folder that does not exist is nothing to tidy.
        assert!(remove_stale_temporaries(&dir.path().join("gone/x.csv")).is_empty());
    }

    #[test]
    fn replaces_and_leaves_no_temporary_behind() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("sheet.csv");
        write_atomic(&path, b"one").unwrap();
        write_atomic(&path, b"two").unwrap();
        assert_eq!(fs::read(&path).unwrap(), b"two");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn a_failing_write_keeps_the_previous_file() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("sheet.csv");
        write_atomic(&path, b"before").unwrap();
        let result = write_atomic_with(&path, |file| {
            file.write_all(b"half of the new")?;
            Err(io::Error::other("disk full (injected)"))
        });
        assert!(matches!(result, Err(WriteError::Write { .. })));
        assert_eq!(fs::read(&path).unwrap(), b"before");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn write_new_refuses_without_force_and_original_is_kept_once() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("out.csv");
        write_new(&path, b"a", false).unwrap();
        assert!(matches!(
            write_new(&path, b"b", false),
            Err(WriteError::Exists { .. })
        ));
        write_new(&path, b"c", true).unwrap();
        let copy = keep_original(&path).unwrap();
        write_atomic(&path, b"d").unwrap();
        keep_original(&path).unwrap();
        assert_eq!(fs::read(&copy).unwrap(), b"c");
    }

    #[test]
    fn keep_original_copies_only_an_existing_file_and_never_replaces_the_copy() {
        let dir = tempfile::tempdir().unwrap();
        let sheet = dir.path().join("day1.csv");
        // Nothing to keep yet: no copy is made (a new sheet has no original).
        let copy = keep_original(&sheet).unwrap();
        assert_eq!(copy, dir.path().join("day1.csv.orig"));
        assert!(!copy.exists());
        write_atomic(&sheet, b"as the crew typed it").unwrap();
        keep_original(&sheet).unwrap();
        write_atomic(&sheet, b"first edit").unwrap();
        // A later session's first edit keeps the copy of the very first original.
        keep_original(&sheet).unwrap();
        write_atomic(&sheet, b"second session").unwrap();
        assert_eq!(fs::read(&copy).unwrap(), b"as the crew typed it");
        assert_eq!(fs::read(&sheet).unwrap(), b"second session");
    }
}
