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

use crate::packing::{self, WordWidth, PAIR_BYTES};
use crate::storage::Store;
use crate::{Error, Result};
use std::cell::RefCell;
use std::fs::{File, OpenOptions};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

/// A preallocated scratch file of `len` words, removed when dropped.
pub struct FileStore {
    file: File,
    path: PathBuf,
    len: usize,
    width: WordWidth,
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
    /// words of `width`.
    pub fn create(path: &Path, len: usize, width: WordWidth) -> Result<Self> {
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
            width,
            keep: false,
        };
        preallocate(&store.file, width.bytes(len as u64)).map_err(|e| scratch_error(path, e))?;
        Ok(store)
    }

    /// Opens `path` as a store of `len` words of `width` that outlives
    /// this process: an existing file of exactly that size is reused (its
    /// words are what an earlier run left; the journal says which to
    /// trust), anything else is replaced by a fresh preallocated file.
    /// Returns the store and whether an existing file was reused. Never
    /// removed when dropped.
    pub fn open_kept(path: &Path, len: usize, width: WordWidth) -> Result<(Self, bool)> {
        let bytes = width.bytes(len as u64);
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
                    width,
                    keep: true,
                };
                return Ok((store, true));
            }
            std::fs::remove_file(path).map_err(|e| scratch_error(path, e))?;
        }
        let mut store = FileStore::create(path, len, width)?;
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

/// Pairs packed or unpacked per system call: bounds the per-thread buffer
/// (about 416 KiB) whatever the length of a read or write.
const PACK_CHUNK_PAIRS: usize = 1 << 15;

/// Bytes of the per-thread buffer of packed stores, for the planner.
pub const PACK_BUFFER_BYTES: u64 = (PACK_CHUNK_PAIRS * PAIR_BYTES) as u64;

thread_local! {
    static PACKED: RefCell<Vec<u8>> = const { RefCell::new(Vec::new()) };
}

impl FileStore {
    /// Reads pair `pair` (words `2 * pair` and `2 * pair + 1`).
    fn read_pair(&self, pair: usize) -> Result<[u64; 2]> {
        let mut b = [0u8; PAIR_BYTES];
        self.file
            .read_exact_at(&mut b, (pair * PAIR_BYTES) as u64)
            .map_err(|e| Error::io(&self.path, e))?;
        let mut w = [0u64; 2];
        packing::unpack(&b, &mut w);
        Ok(w)
    }

    fn write_pair(&self, pair: usize, w: [u64; 2]) -> Result<()> {
        let mut b = [0u8; PAIR_BYTES];
        self.pack_checked(&w, &mut b, 2 * pair)?;
        self.file
            .write_all_at(&b, (pair * PAIR_BYTES) as u64)
            .map_err(|e| scratch_error(&self.path, e))
    }

    fn pack_checked(&self, words: &[u64], out: &mut [u8], first: usize) -> Result<()> {
        if packing::pack(words, out) {
            return Ok(());
        }
        let at = first
            + words
                .iter()
                .position(|&w| w >> packing::PACKED_BITS != 0)
                .unwrap_or(0);
        Err(Error::verify(
            format!(
                "{}: word {at} is 2^52 or more and cannot be stored packed: a residue broke its bound",
                self.path.display()
            ),
            "this is a bug in vastmul; rerun with VASTMUL_KERNEL=scalar and report both runs",
        ))
    }

    /// Words `start..start + out.len()` of a packed store. A word that
    /// shares its pair with one outside the range is read with its pair.
    fn read_packed(&self, mut start: usize, mut out: &mut [u64]) -> Result<()> {
        if out.is_empty() {
            return Ok(());
        }
        if start % 2 == 1 {
            out[0] = self.read_pair(start / 2)?[1];
            start += 1;
            out = &mut out[1..];
        }
        let whole = out.len() & !1;
        let (body, tail) = out.split_at_mut(whole);
        PACKED.with_borrow_mut(|buf| -> Result<()> {
            for (i, chunk) in body.chunks_mut(2 * PACK_CHUNK_PAIRS).enumerate() {
                let pair = start / 2 + i * PACK_CHUNK_PAIRS;
                let bytes = chunk.len() / 2 * PAIR_BYTES;
                buf.resize(bytes.max(buf.len()), 0);
                self.file
                    .read_exact_at(&mut buf[..bytes], (pair * PAIR_BYTES) as u64)
                    .map_err(|e| Error::io(&self.path, e))?;
                packing::unpack(&buf[..], chunk);
            }
            Ok(())
        })?;
        if let Some(last) = tail.first_mut() {
            *last = self.read_pair((start + whole) / 2)?[0];
        }
        Ok(())
    }

    /// Writes `data` at word `start` of a packed store. A word that shares
    /// its pair with one outside the range is written by reading the pair
    /// and writing it back, so such edges must not be written by two
    /// threads at once; the out-of-core passes write whole pairs only.
    fn write_packed(&self, mut start: usize, mut data: &[u64]) -> Result<()> {
        if data.is_empty() {
            return Ok(());
        }
        if start % 2 == 1 {
            let mut w = self.read_pair(start / 2)?;
            w[1] = data[0];
            self.write_pair(start / 2, w)?;
            start += 1;
            data = &data[1..];
        }
        let whole = data.len() & !1;
        PACKED.with_borrow_mut(|buf| -> Result<()> {
            for (i, chunk) in data[..whole].chunks(2 * PACK_CHUNK_PAIRS).enumerate() {
                let first = start + i * 2 * PACK_CHUNK_PAIRS;
                let bytes = chunk.len() / 2 * PAIR_BYTES;
                buf.resize(bytes.max(buf.len()), 0);
                self.pack_checked(chunk, &mut buf[..], first)?;
                self.file
                    .write_all_at(&buf[..bytes], (first / 2 * PAIR_BYTES) as u64)
                    .map_err(|e| scratch_error(&self.path, e))?;
            }
            Ok(())
        })?;
        if let Some(&last) = data.get(whole) {
            let pair = (start + whole) / 2;
            let mut w = self.read_pair(pair)?;
            w[0] = last;
            self.write_pair(pair, w)?;
        }
        Ok(())
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
        match self.width {
            WordWidth::Full => self
                .file
                .read_exact_at(as_bytes_mut(out), (start * 8) as u64)
                .map_err(|e| Error::io(&self.path, e)),
            WordWidth::Packed52 => self.read_packed(start, out),
        }
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        debug_assert!(start + data.len() <= self.len);
        match self.width {
            WordWidth::Full => self
                .file
                .write_all_at(as_bytes(data), (start * 8) as u64)
                .map_err(|e| scratch_error(&self.path, e)),
            WordWidth::Packed52 => self.write_packed(start, data),
        }
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
    fn store(&self, name: &str, len: usize, width: WordWidth) -> Result<(Box<dyn Store>, bool)> {
        if self.kept {
            let (s, reused) = FileStore::open_kept(&self.dir.join(name), len, width)?;
            Ok((Box::new(s), reused))
        } else {
            let path = crate::engine::scratch_path(&self.dir, name);
            let s = FileStore::create(&path, len, width)?;
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
            let s = FileStore::create(&path, 1000, WordWidth::Full).unwrap();
            assert_eq!(std::fs::metadata(&path).unwrap().len(), 8000);
            s.write(10, &[1, 2, u64::MAX]).unwrap();
            let mut out = [7u64; 5];
            s.read(9, &mut out).unwrap();
            assert_eq!(out, [0, 1, 2, u64::MAX, 0]);
            assert!(
                FileStore::create(&path, 10, WordWidth::Full).is_err(),
                "never reuses an existing file"
            );
        }
        assert!(!path.exists());
    }

    /// A packed store against a plain array: ranges with odd and even
    /// ends, inside one pair, across the chunk size, and the last pair.
    #[test]
    fn packed_store_matches_a_plain_array() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.bin");
        let len = 2 * PACK_CHUNK_PAIRS + 101;
        let s = FileStore::create(&path, len, WordWidth::Packed52).unwrap();
        assert_eq!(
            std::fs::metadata(&path).unwrap().len(),
            (len as u64).div_ceil(2) * PAIR_BYTES as u64
        );
        let mut model = vec![0u64; len];
        let mut rng = crate::rng::Rng::new(7);
        let top = (1u64 << packing::PACKED_BITS) - 1;
        let ranges = [
            (0, 2),
            (1, 1),
            (3, 4),
            (4, 7),
            (10, 2 * PACK_CHUNK_PAIRS + 5),
            (len - 1, 1),
            (len - 4, 4),
            (0, len),
            (2 * PACK_CHUNK_PAIRS - 3, 9),
        ];
        for round in 0..3 {
            for &(start, n) in &ranges {
                let data: Vec<u64> = (0..n)
                    .map(|i| match (i + round) % 5 {
                        0 => top,
                        1 => 0,
                        _ => rng.next_u64() & top,
                    })
                    .collect();
                s.write(start, &data).unwrap();
                model[start..start + n].copy_from_slice(&data);
                for &(rs, rn) in &ranges {
                    let mut out = vec![u64::MAX; rn];
                    s.read(rs, &mut out).unwrap();
                    assert_eq!(out, model[rs..rs + rn], "read {rs}+{rn} after {start}+{n}");
                }
            }
        }
        // A word that does not fit is refused, naming the file and word.
        let e = s.write(6, &[1, 1 << 52]).unwrap_err();
        assert!(matches!(e, Error::Verify { .. }), "{e}");
        assert!(e.to_string().contains("word 7"), "{e}");
        drop(s);
        // A kept store of the packed size is reused; of the full size, not.
        let kept = dir.path().join("k.bin");
        drop(FileStore::open_kept(&kept, 10, WordWidth::Packed52).unwrap());
        assert!(
            FileStore::open_kept(&kept, 10, WordWidth::Packed52)
                .unwrap()
                .1
        );
        assert!(!FileStore::open_kept(&kept, 10, WordWidth::Full).unwrap().1);
    }

    #[test]
    fn free_space_is_reported() {
        let dir = tempfile::tempdir().unwrap();
        assert!(free_space(dir.path()).unwrap() > 0);
        assert!(free_space(&dir.path().join("missing")).is_err());
    }
}
