//! Output files that never replace an input and never stay half written.
//!
//! These rules hold for every file the command-line program writes (`--output`, `--junit`, the
//! charts of `--plot`, the model of `generate`), and for the model files the C library saves
//! (`ringmain_model_save`, the Python package's `Model.save`), the first rule apart (a library
//! caller may well save a model over the file it came from):
//!
//! 1. An output path that is one of the run's inputs (the model, a criteria file) is refused
//!    before any work, with exit code 2. "Is" means the same file, by identity (device and inode
//!    on Unix), not by name: `./net.toml`, `net.toml`, a symbolic link to it or a hard link all
//!    count.
//! 2. A regular file is written to a temporary file in the same directory and renamed over the
//!    destination only once everything is written and flushed. A failed run (a write error, a
//!    full disk, a panic) leaves the destination as it was and removes the temporary file.
//!    Anything that is not a regular file (`/dev/null`, a named pipe) is written in place:
//!    renaming over it would replace the device with a file.
//! 3. With `--durable` ([`set_durable`]), the file is also forced to the disk (`fsync`) before
//!    its rename, so that it survives a crash of the machine, not only a failure of the run.
//!    That is off by default: the disk's time for it is paid by every run (at 1e5 junctions the
//!    44 MB of JSON results took 37–46 ms of `fsync`, a sixth of the whole run, on the
//!    development machine), while a run whose machine crashed is simply run again; without it a
//!    crash of the machine (not of the run) just after the rename may leave the new file empty
//!    or short on some file systems.

use std::fs::{File, OpenOptions};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};

/// Whether files are forced to the disk before their rename (rule 3 of the module docs).
static DURABLE: AtomicBool = AtomicBool::new(false);

/// Sets, for the whole process, whether output files are forced to the disk before they are put
/// in place (the program's `--durable`).
pub fn set_durable(durable: bool) {
    DURABLE.store(durable, Ordering::Relaxed);
}

/// Whether output files are forced to the disk before they are put in place.
pub fn durable() -> bool {
    DURABLE.load(Ordering::Relaxed)
}

/// Whether two paths name the same existing file. A path that does not exist names no file.
pub fn same_file(a: &Path, b: &Path) -> bool {
    let (Ok(ma), Ok(mb)) = (std::fs::metadata(a), std::fs::metadata(b)) else { return false };
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        ma.dev() == mb.dev() && ma.ino() == mb.ino()
    }
    #[cfg(not(unix))]
    {
        let _ = (ma, mb);
        match (a.canonicalize(), b.canonicalize()) {
            (Ok(x), Ok(y)) => x == y,
            _ => false,
        }
    }
}

/// Refuses an output that is one of the inputs: returns the message to print (exit code 2).
///
/// `option` is how the user named the output (`--output`, `--junit`, `--plot`), `inputs` the
/// files the run reads, each with how it was given.
pub fn refuse_input(option: &str, output: &Path, inputs: &[(&str, &Path)]) -> Result<(), String> {
    for (what, input) in inputs {
        if same_file(output, input) {
            return Err(format!(
                "{option} {}: this is the {what} {} (the same file); an output never replaces an input, \
                 choose another path",
                output.display(),
                input.display()
            ));
        }
    }
    Ok(())
}

/// A counter that keeps temporary names apart within one process.
static SERIAL: AtomicU32 = AtomicU32::new(0);

/// The temporary file beside `path`: hidden, named after it and this process.
fn temporary_path(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    let serial = SERIAL.fetch_add(1, Ordering::Relaxed);
    path.with_file_name(format!(".{name}.{}-{serial}.partial", std::process::id()))
}

/// Removes the temporary file unless it was renamed into place.
struct Partial {
    path: PathBuf,
    done: bool,
}

impl Drop for Partial {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

/// An output file written as a run goes (a streamed series), all or nothing: [`OutputFile::create`]
/// gives the file to write, under a temporary name beside its destination, with its write-back
/// started as it goes ([`EarlyWriteback`]); [`OutputFile::commit`] renames it into place (made
/// durable first with `--durable`). Dropped without a commit (an error, a panic), it removes the
/// temporary file and leaves the destination as it was. A destination that is not a regular file
/// (a device, a named pipe) is written in place.
pub struct OutputFile {
    /// The temporary file, or `None` when the destination is written in place.
    partial: Option<Partial>,
    path: PathBuf,
}

impl OutputFile {
    /// Opens the file to write for `path` (see the type's docs).
    pub fn create(path: &Path) -> io::Result<(OutputFile, EarlyWriteback)> {
        let existing = std::fs::metadata(path).ok();
        if existing.as_ref().is_some_and(|m| m.is_dir()) {
            return Err(io::Error::other("it is a directory"));
        }
        if existing.as_ref().is_some_and(|m| !m.is_file()) {
            let file = OpenOptions::new().write(true).open(path)?;
            return Ok((OutputFile { partial: None, path: path.to_owned() }, EarlyWriteback::new(file, false)));
        }
        let partial = Partial { path: temporary_path(path), done: false };
        let file = OpenOptions::new().write(true).create_new(true).open(&partial.path)?;
        if let Some(m) = &existing {
            // A replaced file keeps its permissions.
            let _ = file.set_permissions(m.permissions());
        }
        Ok((OutputFile { partial: Some(partial), path: path.to_owned() }, EarlyWriteback::new(file, true)))
    }

    /// Puts the written file in place: once everything written to it has been flushed (and its
    /// handle closed), makes it durable if asked (`--durable`) and renames it over the
    /// destination.
    pub fn commit(mut self) -> io::Result<()> {
        if let Some(partial) = &mut self.partial {
            if durable() {
                File::open(&partial.path)?.sync_all()?;
            }
            std::fs::rename(&partial.path, &self.path)?;
            partial.done = true;
        }
        Ok(())
    }
}

/// Writes what `write` writes to `path`, all or nothing (see the module docs): the one path
/// every whole file of the program goes through.
pub fn write_file(path: &Path, write: impl FnOnce(&mut dyn Write) -> io::Result<()>) -> io::Result<()> {
    const BUFFER: usize = 1 << 16;
    let (output, file) = OutputFile::create(path)?;
    let mut out = BufWriter::with_capacity(BUFFER, file);
    write(&mut out)?;
    // Flushed and closed before the commit, which makes it durable if asked.
    drop(out.into_inner().map_err(|e| e.into_error())?);
    output.commit()
}

/// A file whose written bytes start on their way to the disk as the writing goes: every
/// 2 MB (`STEP`), the write-back of what was written since is started without
/// waiting for it (Linux's `sync_file_range` with `SYNC_FILE_RANGE_WRITE`), so that what waits
/// for the disk at the end waits for the last part only, not for the whole file:
/// - with `--durable`, the `sync_all` before the rename (at a million junctions the results
///   are 400 MB: a quarter of a second of the disk's time, overlapped with the formatting
///   instead of after it);
/// - without it, the rename itself where it replaces a file: ext4 (with its default
///   `auto_da_alloc`) then allocates and starts writing the new file's blocks inside the
///   rename, which took 33–47 ms for the 44 MB of results at 1e5 junctions with no write-back
///   started, 13–16 ms with write-back started every 2 MB (strace, on the development machine;
///   what remains is mostly freeing the replaced file).
///
/// Elsewhere, or for a destination written in place (a device, a pipe), it is the plain file.
pub struct EarlyWriteback {
    /// The file written.
    pub file: File,
    /// Whether to start write-back at all.
    enabled: bool,
    written: u64,
    started: u64,
}

impl EarlyWriteback {
    const STEP: u64 = 2 << 20;

    /// `file`, its write-back started as it is written if `enabled`.
    pub fn new(file: File, enabled: bool) -> Self {
        EarlyWriteback { file, enabled, written: 0, started: 0 }
    }

    #[cfg(target_os = "linux")]
    fn start(&mut self) {
        use std::os::fd::AsRawFd;
        let (Ok(offset), Ok(len)) = (i64::try_from(self.started), i64::try_from(self.written - self.started)) else {
            return;
        };
        // SAFETY: the descriptor is the open file this value owns; the call reads no memory of
        // ours. It is advice: a failure (an old kernel, a file system without it) is ignored, and
        // the final `sync_all` still makes the whole file durable.
        unsafe {
            libc::sync_file_range(self.file.as_raw_fd(), offset, len, libc::SYNC_FILE_RANGE_WRITE);
        }
        self.started = self.written;
    }

    #[cfg(not(target_os = "linux"))]
    fn start(&mut self) {
        self.started = self.written;
    }
}

impl Write for EarlyWriteback {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let n = self.file.write(buf)?;
        self.written += n as u64;
        if self.enabled && self.written - self.started >= Self::STEP {
            self.start();
        }
        Ok(n)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.file.flush()
    }
}

/// Starts, on a thread of its own, dropping from memory the cached pages of the regular file an
/// output will replace: replacing a file frees its pages in the rename that puts the new one in
/// place (at 1e5 junctions some 10–25 ms for the 39 MB of results), while a core may well be
/// idle before that (the solver's iteration is one thread's work). Advice only: the file's
/// contents and its place are untouched, so a run that fails still leaves it as it was, and
/// reading it again merely reads the disk. Elsewhere than Linux, and for anything but an
/// existing regular file, nothing is done.
pub fn forget_replaced_pages(path: &Path) {
    #[cfg(target_os = "linux")]
    if std::fs::metadata(path).is_ok_and(|m| m.is_file()) {
        let path = path.to_owned();
        let _ = std::thread::Builder::new().spawn(move || {
            use std::os::fd::AsRawFd;
            if let Ok(file) = File::open(&path) {
                // SAFETY: the descriptor is the open file this closure owns; the call reads no
                // memory of ours. Its failure changes nothing.
                unsafe {
                    libc::posix_fadvise(file.as_raw_fd(), 0, 0, libc::POSIX_FADV_DONTNEED);
                }
            }
        });
    }
    #[cfg(not(target_os = "linux"))]
    let _ = path;
}

/// Writes `text` to `path`, all or nothing.
pub fn write_text(path: &Path, text: &str) -> io::Result<()> {
    write_file(path, |out| out.write_all(text.as_bytes()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("ringmain-output-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        dir
    }

    fn leftovers(dir: &Path) -> Vec<String> {
        std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.ends_with(".partial"))
            .collect()
    }

    #[test]
    fn streamed_file_is_put_in_place_only_when_committed() {
        let dir = scratch("streamed");
        let path = dir.join("series.csv");
        std::fs::write(&path, "old").unwrap();
        // Written, then abandoned (an error in the middle of a run): nothing changes.
        let (output, mut file) = OutputFile::create(&path).unwrap();
        file.write_all(b"half of a ser").unwrap();
        drop(file);
        drop(output);
        assert_eq!(std::fs::read_to_string(&path).unwrap(), "old");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        // Written whole and committed: replaced.
        let (output, mut file) = OutputFile::create(&path).unwrap();
        file.write_all(b"new").unwrap();
        drop(file);
        output.commit().unwrap();
        assert_eq!(std::fs::read_to_string(&path).unwrap(), "new");
        assert!(leftovers(&dir).is_empty());
        assert!(OutputFile::create(&dir).is_err(), "a directory is not an output file");
    }

    #[test]
    fn failed_write_leaves_the_old_file_and_no_partial_file() {
        let dir = scratch("failed");
        let path = dir.join("out.txt");
        std::fs::write(&path, "old").unwrap();
        let e = write_file(&path, |out| {
            out.write_all(b"half of the new")?;
            Err(io::Error::other("disk full"))
        });
        assert!(e.is_err());
        assert_eq!(std::fs::read_to_string(&path).unwrap(), "old");
        assert!(leftovers(&dir).is_empty());
        write_file(&path, |out| out.write_all(b"new")).unwrap();
        assert_eq!(std::fs::read_to_string(&path).unwrap(), "new");
        assert!(leftovers(&dir).is_empty());
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn same_file_by_identity_not_by_name() {
        let dir = scratch("identity");
        let a = dir.join("net.toml");
        std::fs::write(&a, "x").unwrap();
        let dotted = dir.join(".").join("net.toml");
        assert!(same_file(&a, &dotted));
        let hard = dir.join("hard.toml");
        std::fs::hard_link(&a, &hard).unwrap();
        assert!(same_file(&a, &hard));
        #[cfg(unix)]
        {
            let soft = dir.join("soft.toml");
            std::os::unix::fs::symlink(&a, &soft).unwrap();
            assert!(same_file(&a, &soft));
        }
        let other = dir.join("other.toml");
        std::fs::write(&other, "x").unwrap();
        assert!(!same_file(&a, &other));
        assert!(!same_file(&a, &dir.join("missing.toml")));
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn devices_are_written_in_place_not_replaced() {
        #[cfg(unix)]
        {
            write_file(Path::new("/dev/null"), |out| out.write_all(b"nothing")).unwrap();
            assert!(!std::fs::metadata("/dev/null").unwrap().is_file());
        }
    }
}
