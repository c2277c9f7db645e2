//! Bounded reading of the small text files rchold is given (stage files,
//! mapping files): a regular file of at most [`MAX_TEXT_BYTES`], read once,
//! so `/dev/zero`, a FIFO that never ends or a mistyped multi-gigabyte path
//! get a one-line refusal instead of filling memory.

use std::io::Read as _;
use std::path::Path;

/// The largest stage or mapping file accepted, bytes (1 MiB).
pub const MAX_TEXT_BYTES: u64 = 1 << 20;

/// The text of `path`: a regular file of at most `max_bytes` bytes of UTF-8.
///
/// # Errors
/// A message (without the path) saying what is wrong and what is accepted.
pub fn read_text(path: &Path, max_bytes: u64) -> Result<String, String> {
    let accepted = format!("accepted: a regular file of at most {} KiB of UTF-8 text", max_bytes / 1024);
    let meta = std::fs::metadata(path).map_err(|e| format!("cannot read the file: {e}"))?;
    if !meta.is_file() {
        return Err(format!("is not a regular file ({accepted})"));
    }
    if meta.len() > max_bytes {
        return Err(format!("has {} bytes ({accepted})", meta.len()));
    }
    let f = std::fs::File::open(path).map_err(|e| format!("cannot read the file: {e}"))?;
    // A file that grows while it is read is still cut at the limit.
    let mut bytes = Vec::with_capacity(usize::try_from(meta.len()).unwrap_or(0));
    f.take(max_bytes + 1).read_to_end(&mut bytes).map_err(|e| format!("cannot read the file: {e}"))?;
    if bytes.len() as u64 > max_bytes {
        return Err(format!("grew past {max_bytes} bytes while it was read ({accepted})"));
    }
    String::from_utf8(bytes)
        .map_err(|e| format!("is not UTF-8 text at byte {} ({accepted})", e.utf8_error().valid_up_to()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn devices_folders_and_big_files_are_refused() {
        let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
        let m = |p: &Path| read_text(p, 1024).err().unwrap_or_default();
        assert!(m(Path::new("/dev/zero")).contains("not a regular file"), "{}", m(Path::new("/dev/zero")));
        assert!(m(dir.path()).contains("not a regular file"));
        let big = dir.path().join("big.toml");
        std::fs::write(&big, vec![b'#'; 2048]).unwrap_or_else(|e| panic!("{e}"));
        assert!(m(&big).contains("has 2048 bytes") && m(&big).contains("at most 1 KiB"), "{}", m(&big));
        let bin = dir.path().join("bin.toml");
        std::fs::write(&bin, [b'a', 0xFF, b'b']).unwrap_or_else(|e| panic!("{e}"));
        assert!(m(&bin).contains("not UTF-8 text at byte 1"), "{}", m(&bin));
        let ok = dir.path().join("ok.toml");
        std::fs::write(&ok, "a = 1\n").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(read_text(&ok, 1024).ok().as_deref(), Some("a = 1\n"));
    }
}
