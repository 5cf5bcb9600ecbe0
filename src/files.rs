//! Writing files whole or not at all: a temporary name beside the target, then a rename, so a
//! crash or a full disk never leaves a half-written result under the real name.

use crate::error::{Error, Result};
use std::path::Path;

/// Write `bytes` to `path` whole or not at all.
pub fn write_whole(path: &Path, bytes: &[u8]) -> Result<()> {
    let mut tmp_name = path.file_name().unwrap_or_default().to_os_string();
    tmp_name.push(".partial");
    let tmp = path.with_file_name(tmp_name);
    std::fs::write(&tmp, bytes)
        .and_then(|_| std::fs::rename(&tmp, path))
        .map_err(|source| {
            let _ = std::fs::remove_file(&tmp);
            Error::Write {
                path: path.to_path_buf(),
                source,
            }
        })
}
