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

/// A reader that refuses a line longer than `max` bytes (the bytes since
/// the last line feed), so that a log without line breaks cannot fill the
/// memory of a parser that buffers a whole line (the CSV reader of mapped logs).
#[derive(Debug)]
pub struct LineBound<R> {
    inner: R,
    max: usize,
    run: usize,
}

impl<R> LineBound<R> {
    /// Reads `inner`, refusing lines longer than `max` bytes.
    pub const fn new(inner: R, max: usize) -> Self {
        LineBound { inner, max, run: 0 }
    }
}

impl<R: std::io::Read> std::io::Read for LineBound<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        let got = buf.get(..n).unwrap_or(&[]);
        self.run = match memchr::memrchr(b'\n', got) {
            Some(i) => n - i - 1,
            None => self.run + n,
        };
        if self.run > self.max {
            return Err(std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                format!(
                    "a line is longer than {} bytes (accepted: lines of at most {} KiB)",
                    self.max,
                    self.max / 1024
                ),
            ));
        }
        Ok(n)
    }
}

/// A reader that keeps the SHA-256 and the length of what passed through it:
/// a file's digest taken while it is parsed, so it is read once (pipes and
/// FIFOs work, and a file that changes meanwhile cannot be stored under
/// another content's digest).
#[derive(Debug)]
pub struct Digesting<R> {
    inner: R,
    hash: sha2::Sha256,
    bytes: u64,
}

impl<R> Digesting<R> {
    /// Reads `inner`.
    pub fn new(inner: R) -> Self {
        use sha2::Digest as _;
        Digesting { inner, hash: sha2::Sha256::new(), bytes: 0 }
    }

    /// The SHA-256 (hex) and length of what was read.
    pub fn finish(self) -> (String, u64) {
        use sha2::Digest as _;
        (crate::data::store::hex(&self.hash.finalize()), self.bytes)
    }
}

impl<R: std::io::Read> std::io::Read for Digesting<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        use sha2::Digest as _;
        let n = self.inner.read(buf)?;
        self.hash.update(buf.get(..n).unwrap_or(&[]));
        self.bytes += n as u64;
        Ok(n)
    }
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

    #[test]
    fn long_lines_are_refused_whatever_the_reads() {
        let mut text = vec![b'a'; 100];
        text.push(b'\n');
        text.extend(vec![b'b'; 300]);
        let mut out = Vec::new();
        let r = LineBound::new(&text[..], 200).read_to_end(&mut out);
        assert!(r.is_err_and(|e| e.to_string().contains("longer than 200 bytes")));
        let mut out = Vec::new();
        assert!(LineBound::new(&text[..], 300).read_to_end(&mut out).is_ok());
        let mut d = Digesting::new(&b"abc"[..]);
        let mut out = Vec::new();
        assert!(d.read_to_end(&mut out).is_ok());
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(d.finish(), ("ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad".to_owned(), 3));
    }
}
