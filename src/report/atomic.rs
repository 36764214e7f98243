//! Atomic file output: write to a temporary file in the target folder, then rename over the
//! target, so a reader never sees a half-written file and a crash leaves the old file intact.

use std::fs;
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// Writes `bytes` to `path` atomically.
///
/// The bytes go to a temporary sibling file (same folder, so the rename cannot cross file
/// systems), which is flushed to disk and renamed over `path`.
///
/// # Errors
/// Any I/O error; the temporary file is removed on failure.
///
/// # Examples
/// ```
/// let dir = tempfile::tempdir()?;
/// let p = dir.path().join("out.txt");
/// isosbestic::report::atomic::write_atomic(&p, b"hello")?;
/// assert_eq!(std::fs::read_to_string(&p)?, "hello");
/// # Ok::<(), std::io::Error>(())
/// ```
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let tmp = temporary_sibling(path);
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result
}

fn temporary_sibling(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    path.with_file_name(format!(".{name}.tmp-{}", std::process::id()))
}
