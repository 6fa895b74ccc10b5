//! Reading a network file when its text is needed as well as the model: the edges that write the
//! fitted C back into the file (`calibrate`, `apply`, the workbench) read it here, once, with the same
//! diagnostics as [`super::file::load_network_file`].

use std::path::Path;

use super::file::{LoadedNetwork, NetworkFileError, load_network_file, parse_network};

/// A network file as read: its text, and the model with its source map.
#[derive(Debug, Clone)]
pub struct NetworkText {
    pub text: String,
    pub loaded: LoadedNetwork,
}

/// Reads and parses the network file at `path`, keeping its text. An unreadable file is
/// [`NetworkFileError::Unreadable`]; text that is not UTF-8, and every defect of the content, are
/// [`NetworkFileError::Invalid`] with the diagnostics [`load_network_file`] gives.
pub fn read_network(path: &Path) -> Result<NetworkText, NetworkFileError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|source| NetworkFileError::Unreadable {
        file: file.clone(),
        source,
    })?;
    match String::from_utf8(bytes) {
        Ok(text) => {
            let loaded = parse_network(&text, &file)?;
            Ok(NetworkText { text, loaded })
        }
        // The loader words the place of the first bad byte; should the file have become good text in
        // between, it is still not the text read a moment ago.
        Err(_) => match load_network_file(path) {
            Err(error) => Err(error),
            Ok(_) => Err(NetworkFileError::Unreadable {
                file,
                source: std::io::Error::new(
                    std::io::ErrorKind::InvalidData,
                    "the file changed while it was read",
                ),
            }),
        },
    }
}
