//! Scratch files on disk: a [`Store`] backend that reads and writes word
//! ranges with positional I/O, plus free-space checks.
//!
//! Positional reads and writes (not a memory map) keep the process's
//! resident memory to its own buffers: the page cache holds the file, and
//! the kernel evicts it as needed, so a budget set with `--memory` is what
//! the operating system reports. Files are preallocated before use, so a
//! full disk is an error at creation, never a fault mid-run.
//!
//! Words are stored in native byte order: scratch files belong to one run
//! on one machine.

use crate::storage::Store;
use crate::{Error, Result};
use std::fs::{File, OpenOptions};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

/// A preallocated scratch file of `len` words, removed when dropped.
pub struct FileStore {
    file: File,
    path: PathBuf,
    len: usize,
    /// Kept when dropped: part of a run's resumable state.
    keep: bool,
}

fn as_bytes(words: &[u64]) -> &[u8] {
    // SAFETY: u8 has no alignment requirement and every u64 is 8 plain
    // bytes; the view borrows `words` for its whole life.
    unsafe { std::slice::from_raw_parts(words.as_ptr() as *const u8, words.len() * 8) }
}

fn as_bytes_mut(words: &mut [u64]) -> &mut [u8] {
    // SAFETY: as in `as_bytes`; any byte pattern is a valid u64.
    unsafe { std::slice::from_raw_parts_mut(words.as_mut_ptr() as *mut u8, words.len() * 8) }
}

impl FileStore {
    /// Creates and preallocates `path` (which must not exist) for `len`
    /// words.
    pub fn create(path: &Path, len: usize) -> Result<Self> {
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .create_new(true)
            .open(path)
            .map_err(|e| scratch_error(path, e))?;
        let store = FileStore {
            file,
            path: path.to_path_buf(),
            len,
            keep: false,
        };
        preallocate(&store.file, (len * 8) as u64).map_err(|e| scratch_error(path, e))?;
        Ok(store)
    }

    /// Opens `path` as a store of `len` words that outlives this process:
    /// an existing file of exactly that size is reused (its words are what
    /// an earlier run left; the journal says which to trust), anything else
    /// is replaced by a fresh preallocated file. Returns the store and
    /// whether an existing file was reused. Never removed when dropped.
    pub fn open_kept(path: &Path, len: usize) -> Result<(Self, bool)> {
        let bytes = (len * 8) as u64;
        if let Ok(meta) = std::fs::metadata(path) {
            if meta.is_file() && meta.len() == bytes {
                let file = OpenOptions::new()
                    .read(true)
                    .write(true)
                    .open(path)
                    .map_err(|e| scratch_error(path, e))?;
                let store = FileStore {
                    file,
                    path: path.to_path_buf(),
                    len,
                    keep: true,
                };
                return Ok((store, true));
            }
            std::fs::remove_file(path).map_err(|e| scratch_error(path, e))?;
        }
        let mut store = FileStore::create(path, len)?;
        store.keep = true;
        Ok((store, false))
    }

    /// The scratch file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }
}

impl Drop for FileStore {
    fn drop(&mut self) {
        if !self.keep {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

fn scratch_error(path: &Path, e: std::io::Error) -> Error {
    if e.raw_os_error() == Some(libc::ENOSPC) {
        Error::Resources {
            what: format!("{}: the scratch disk is full", path.display()),
            fix: "free space there, or pass --scratch DIR on a disk with more room".into(),
        }
    } else {
        Error::io(path, e)
    }
}

/// Reserves `bytes` of disk for `file`, so that later writes cannot fail
/// for lack of space.
fn preallocate(file: &File, bytes: u64) -> std::io::Result<()> {
    if bytes == 0 {
        return Ok(());
    }
    #[cfg(target_os = "linux")]
    {
        use std::os::fd::AsRawFd;
        // SAFETY: posix_fallocate only reads its integer arguments; the
        // descriptor is valid while `file` is borrowed.
        let rc = unsafe { libc::posix_fallocate(file.as_raw_fd(), 0, bytes as libc::off_t) };
        if rc == 0 {
            return Ok(());
        }
        if rc != libc::EOPNOTSUPP && rc != libc::EINVAL {
            return Err(std::io::Error::from_raw_os_error(rc));
        }
    }
    // Where the file system cannot preallocate, write zeros: slower, but a
    // full disk still shows up here rather than later.
    let zeros = vec![0u8; 1 << 20];
    let mut done = 0u64;
    while done < bytes {
        let n = (bytes - done).min(zeros.len() as u64) as usize;
        file.write_all_at(&zeros[..n], done)?;
        done += n as u64;
    }
    Ok(())
}

impl Store for FileStore {
    fn len(&self) -> usize {
        self.len
    }

    fn read(&self, start: usize, out: &mut [u64]) -> Result<()> {
        debug_assert!(start + out.len() <= self.len);
        self.file
            .read_exact_at(as_bytes_mut(out), (start * 8) as u64)
            .map_err(|e| Error::io(&self.path, e))
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        debug_assert!(start + data.len() <= self.len);
        self.file
            .write_all_at(as_bytes(data), (start * 8) as u64)
            .map_err(|e| scratch_error(&self.path, e))
    }

    fn sync(&self) -> Result<()> {
        self.file
            .sync_data()
            .map_err(|e| scratch_error(&self.path, e))
    }

    fn discard(&self) -> Result<()> {
        self.file
            .set_len(0)
            .map_err(|e| scratch_error(&self.path, e))
    }

    fn prefetch(&self, start: usize, len: usize) {
        let len = len.min(self.len.saturating_sub(start));
        if len == 0 {
            return;
        }
        #[cfg(target_os = "linux")]
        {
            use std::os::fd::AsRawFd;
            // SAFETY: posix_fadvise only reads its integer arguments; the
            // descriptor is valid while `self.file` is borrowed. A failed
            // hint changes nothing, so its result is ignored.
            unsafe {
                libc::posix_fadvise(
                    self.file.as_raw_fd(),
                    (start * 8) as libc::off_t,
                    (len * 8) as libc::off_t,
                    libc::POSIX_FADV_WILLNEED,
                );
            }
        }
    }
}

/// A directory of scratch stores for an out-of-core run: temporary ones
/// (removed when dropped, for runs without state), or ones kept as part of
/// a run's resumable state.
pub struct FileSpace {
    dir: PathBuf,
    kept: bool,
}

impl FileSpace {
    /// Stores with unique names in `dir`, removed when dropped.
    pub fn temporary(dir: &Path) -> Self {
        FileSpace {
            dir: dir.to_path_buf(),
            kept: false,
        }
    }

    /// Stores named as asked in the state directory `dir`, kept.
    pub fn kept(dir: &Path) -> Self {
        FileSpace {
            dir: dir.to_path_buf(),
            kept: true,
        }
    }
}

impl crate::ooc::Space for FileSpace {
    fn store(&self, name: &str, len: usize) -> Result<(Box<dyn Store>, bool)> {
        if self.kept {
            let (s, reused) = FileStore::open_kept(&self.dir.join(name), len)?;
            Ok((Box::new(s), reused))
        } else {
            let s = FileStore::create(&crate::engine::scratch_path(&self.dir, name), len)?;
            Ok((Box::new(s), false))
        }
    }
}

/// Bytes available to an unprivileged user on the file system holding
/// `dir`.
pub fn free_space(dir: &Path) -> Result<u64> {
    use std::os::unix::ffi::OsStrExt;
    let c = std::ffi::CString::new(dir.as_os_str().as_bytes()).map_err(|_| {
        Error::usage(
            format!("{}: a path with a NUL byte", dir.display()),
            "choose another scratch directory",
        )
    })?;
    // SAFETY: statvfs writes into the zeroed struct we own and reads the
    // NUL-terminated path, which outlives the call.
    let mut st: libc::statvfs = unsafe { std::mem::zeroed() };
    let rc = unsafe { libc::statvfs(c.as_ptr(), &mut st) };
    if rc != 0 {
        return Err(Error::io(dir, std::io::Error::last_os_error()));
    }
    Ok(st.f_bavail as u64 * st.f_frsize as u64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn file_store_round_trips_and_removes_itself() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("s.bin");
        {
            let s = FileStore::create(&path, 1000).unwrap();
            assert_eq!(std::fs::metadata(&path).unwrap().len(), 8000);
            s.write(10, &[1, 2, u64::MAX]).unwrap();
            let mut out = [7u64; 5];
            s.read(9, &mut out).unwrap();
            assert_eq!(out, [0, 1, 2, u64::MAX, 0]);
            assert!(
                FileStore::create(&path, 10).is_err(),
                "never reuses an existing file"
            );
        }
        assert!(!path.exists());
    }

    #[test]
    fn free_space_is_reported() {
        let dir = tempfile::tempdir().unwrap();
        assert!(free_space(dir.path()).unwrap() > 0);
        assert!(free_space(&dir.path().join("missing")).is_err());
    }
}
