//! A run's resumable state: a directory inside the scratch directory with a
//! manifest (what is being computed) and a journal (which blocks are done).
//!
//! The manifest names the operands by path, size, modification time and a
//! BLAKE3 of their content, and holds the plan and the state's format
//! version; it is written once per run, atomically (temporary file, fsync,
//! rename, fsync of the directory), so it is either the old one or the new
//! one, never torn. The journal is append-only: one fixed-size record per
//! completed block, each with its own checksum, so a record torn by a crash
//! is recognised and ignored; rewriting it (after a resume dropped records
//! that no longer verify) goes through the same atomic replacement as the
//! manifest. Records carry the BLAKE3 of the block they vouch for, and the
//! block is hashed again before it is trusted: nothing on disk is believed
//! because it is there.

use crate::format::Format;
use crate::plan::Plan;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::fs::{File, OpenOptions};
use std::io::Read;
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Version of the state's layout (manifest, journal, scratch files). State
/// of another version is refused, never reinterpreted.
pub const STATE_VERSION: u32 = 3;

/// What identifies an operand file.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct OperandId {
    /// The path as given.
    pub path: PathBuf,
    /// Size in bytes.
    pub size: u64,
    /// Modification time, nanoseconds since the Unix epoch.
    pub mtime_ns: i128,
    /// BLAKE3 of the whole file, hexadecimal.
    pub blake3: String,
}

/// Size and modification time of `path`.
fn stat(path: &Path) -> Result<(u64, i128)> {
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, e))?;
    let mtime = meta
        .modified()
        .ok()
        .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
        .map_or(0, |d| d.as_nanos() as i128);
    Ok((meta.len(), mtime))
}

/// Identifies the operand at `path`: size, modification time and the
/// BLAKE3 of its content.
pub fn identify(path: &Path, operand: &crate::format::Operand) -> Result<OperandId> {
    let (size, mtime_ns) = stat(path)?;
    Ok(OperandId {
        path: path.to_path_buf(),
        size,
        mtime_ns,
        blake3: operand.content_hash().to_hex().to_string(),
    })
}

/// What a run computes: written at its start, compared on every resume.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    /// [`STATE_VERSION`] of the writer.
    pub version: u32,
    /// The writer's package version, for messages.
    pub tool: String,
    /// The operands (one entry for a square of one file).
    pub operands: Vec<OperandId>,
    /// The plan being carried out.
    pub plan: Plan,
    /// The output path as given.
    pub output: PathBuf,
    /// The product's format.
    pub out_format: Format,
}

/// The state directory of one output.
pub struct StateDir {
    path: PathBuf,
}

/// What was found where a state directory may be.
pub enum Found {
    /// No state: a fresh run.
    Nothing,
    /// A readable manifest.
    Manifest(Box<Manifest>),
    /// A state directory whose manifest is missing or unreadable, with why.
    Broken(String),
}

const MANIFEST: &str = "manifest.json";
const JOURNAL: &str = "journal";

impl StateDir {
    /// The state directory for `output` inside `scratch`: named from the
    /// output's absolute path, so that rerunning the same command finds it.
    pub fn for_output(scratch: &Path, output: &Path) -> StateDir {
        let abs = std::path::absolute(output).unwrap_or_else(|_| output.to_path_buf());
        let key = blake3::hash(abs.as_os_str().as_encoded_bytes()).to_hex();
        StateDir {
            path: scratch.join(format!(".vastmul-state-{}", &key[..16])),
        }
    }

    /// The directory's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// A file inside the directory.
    pub fn file(&self, name: &str) -> PathBuf {
        self.path.join(name)
    }

    /// True when the directory exists.
    pub fn exists(&self) -> bool {
        self.path.is_dir()
    }

    /// Looks for state left by an earlier run.
    pub fn find(&self) -> Found {
        if !self.exists() {
            return Found::Nothing;
        }
        let path = self.file(MANIFEST);
        match std::fs::read(&path) {
            Err(e) => Found::Broken(format!("{}: {e}", path.display())),
            Ok(bytes) => match serde_json::from_slice::<Manifest>(&bytes) {
                Ok(m) => Found::Manifest(Box::new(m)),
                Err(e) => Found::Broken(format!("{}: unreadable manifest ({e})", path.display())),
            },
        }
    }

    /// Removes the directory and everything in it.
    pub fn remove(&self) -> Result<()> {
        match std::fs::remove_dir_all(&self.path) {
            Ok(()) => Ok(()),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
            Err(e) => Err(Error::io(&self.path, e)),
        }
    }

    /// Creates the directory (fresh, for a new run) and writes `manifest`.
    pub fn create(&self, manifest: &Manifest) -> Result<()> {
        std::fs::create_dir_all(&self.path).map_err(|e| Error::io(&self.path, e))?;
        let bytes = serde_json::to_vec_pretty(manifest).expect("manifests serialize");
        replace_atomically(&self.path, MANIFEST, &bytes)
    }

    /// Opens the journal, reading the records it holds.
    pub fn journal(&self) -> Result<(Journal, JournalLoad)> {
        Journal::open(&self.file(JOURNAL))
    }
}

/// An I/O error on a state file; a full disk says so, with the fix.
fn state_io(path: &Path, e: std::io::Error) -> Error {
    if e.raw_os_error() == Some(libc::ENOSPC) {
        Error::Resources {
            what: format!("{}: the disk is full", path.display()),
            fix: "free space there".into(),
        }
    } else {
        Error::io(path, e)
    }
}

/// Writes `bytes` as `dir/name` so that a crash leaves the old file or the
/// new one: temporary file, fsync, rename over, fsync of the directory.
fn replace_atomically(dir: &Path, name: &str, bytes: &[u8]) -> Result<()> {
    let tmp = dir.join(format!(".{name}.new"));
    let target = dir.join(name);
    {
        let f = File::create(&tmp).map_err(|e| state_io(&tmp, e))?;
        f.write_all_at(bytes, 0).map_err(|e| state_io(&tmp, e))?;
        f.sync_all().map_err(|e| state_io(&tmp, e))?;
    }
    std::fs::rename(&tmp, &target).map_err(|e| state_io(&target, e))?;
    File::open(dir)
        .and_then(|d| d.sync_all())
        .map_err(|e| state_io(dir, e))
}

/// One completed block.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Record {
    /// The step (see the out-of-core executor's step numbers).
    pub step: u16,
    /// The part within the step (the prime of the first column pass).
    pub part: u16,
    /// The block: column block, row or carry window.
    pub block: u64,
    /// BLAKE3 of what the block wrote.
    pub hash: [u8; 32],
    /// The carry after a carry window (zero elsewhere).
    pub carry: [u64; 3],
}

/// Bytes per journal record: magic, step, part, block, hash, carry, check.
pub const RECORD_BYTES: usize = 4 + 2 + 2 + 8 + 32 + 24 + 8;
const RECORD_MAGIC: [u8; 4] = *b"VJR1";

impl Record {
    fn encode(&self) -> [u8; RECORD_BYTES] {
        let mut b = [0u8; RECORD_BYTES];
        b[0..4].copy_from_slice(&RECORD_MAGIC);
        b[4..6].copy_from_slice(&self.step.to_le_bytes());
        b[6..8].copy_from_slice(&self.part.to_le_bytes());
        b[8..16].copy_from_slice(&self.block.to_le_bytes());
        b[16..48].copy_from_slice(&self.hash);
        for (i, c) in self.carry.iter().enumerate() {
            b[48 + 8 * i..56 + 8 * i].copy_from_slice(&c.to_le_bytes());
        }
        let check = blake3::hash(&b[..72]);
        b[72..80].copy_from_slice(&check.as_bytes()[..8]);
        b
    }

    fn decode(b: &[u8]) -> Option<Record> {
        if b.len() != RECORD_BYTES || b[0..4] != RECORD_MAGIC {
            return None;
        }
        if blake3::hash(&b[..72]).as_bytes()[..8] != b[72..80] {
            return None;
        }
        let word = |i: usize| u64::from_le_bytes(b[i..i + 8].try_into().unwrap());
        Some(Record {
            step: u16::from_le_bytes([b[4], b[5]]),
            part: u16::from_le_bytes([b[6], b[7]]),
            block: word(8),
            hash: b[16..48].try_into().unwrap(),
            carry: [word(48), word(56), word(64)],
        })
    }
}

/// What reading a journal found.
#[derive(Debug, Default)]
pub struct JournalLoad {
    /// The valid records, in order.
    pub records: Vec<Record>,
    /// Bytes after the last valid record (a torn or damaged tail), dropped.
    pub dropped_bytes: u64,
}

/// The append-only journal of completed blocks.
pub struct Journal {
    path: PathBuf,
    file: Mutex<(File, u64)>,
}

impl Journal {
    fn open(path: &Path) -> Result<(Journal, JournalLoad)> {
        let mut file = OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(path)
            .map_err(|e| state_io(path, e))?;
        let mut bytes = Vec::new();
        file.read_to_end(&mut bytes)
            .map_err(|e| state_io(path, e))?;
        let mut load = JournalLoad::default();
        let mut good = 0usize;
        for chunk in bytes.chunks(RECORD_BYTES) {
            match Record::decode(chunk) {
                Some(r) => {
                    load.records.push(r);
                    good += RECORD_BYTES;
                }
                None => break,
            }
        }
        load.dropped_bytes = (bytes.len() - good) as u64;
        let journal = Journal {
            path: path.to_path_buf(),
            file: Mutex::new((file, good as u64)),
        };
        if load.dropped_bytes > 0 {
            journal.rewrite(&load.records)?;
        }
        Ok((journal, load))
    }

    /// The journal's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends a record. It survives the process being killed at once (it
    /// is in the page cache); [`Journal::sync`] makes it survive a crash of
    /// the machine.
    pub fn append(&self, r: &Record) -> Result<()> {
        let mut g = self.file.lock().unwrap();
        let at = g.1;
        g.0.write_all_at(&r.encode(), at)
            .map_err(|e| state_io(&self.path, e))?;
        g.1 = at + RECORD_BYTES as u64;
        Ok(())
    }

    /// Makes the records appended so far durable.
    pub fn sync(&self) -> Result<()> {
        let g = self.file.lock().unwrap();
        g.0.sync_data().map_err(|e| state_io(&self.path, e))
    }

    /// Replaces the journal by `records`, atomically.
    pub fn rewrite(&self, records: &[Record]) -> Result<()> {
        let mut bytes = Vec::with_capacity(records.len() * RECORD_BYTES);
        for r in records {
            bytes.extend_from_slice(&r.encode());
        }
        let dir = self.path.parent().unwrap_or(Path::new("."));
        let name = self
            .path
            .file_name()
            .unwrap()
            .to_string_lossy()
            .into_owned();
        replace_atomically(dir, &name, &bytes)?;
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .open(&self.path)
            .map_err(|e| state_io(&self.path, e))?;
        *self.file.lock().unwrap() = (file, bytes.len() as u64);
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(i: u64) -> Record {
        Record {
            step: 3,
            part: 1,
            block: i,
            hash: *blake3::hash(&i.to_le_bytes()).as_bytes(),
            carry: [i, 2 * i, 3],
        }
    }

    #[test]
    fn journal_round_trips_and_drops_a_torn_tail() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("j");
        {
            let (j, load) = Journal::open(&path).unwrap();
            assert!(load.records.is_empty());
            for i in 0..5 {
                j.append(&rec(i)).unwrap();
            }
            j.sync().unwrap();
        }
        // a torn sixth record: half written
        let f = OpenOptions::new().write(true).open(&path).unwrap();
        f.write_all_at(&rec(5).encode()[..40], 5 * RECORD_BYTES as u64)
            .unwrap();
        let (j, load) = Journal::open(&path).unwrap();
        assert_eq!(load.records, (0..5).map(rec).collect::<Vec<_>>());
        assert_eq!(load.dropped_bytes, 40);
        // the torn tail is gone, and appending continues after record 5
        j.append(&rec(9)).unwrap();
        let (_, load) = Journal::open(&path).unwrap();
        assert_eq!(load.records.len(), 6);
        assert_eq!(load.records[5], rec(9));
    }

    #[test]
    fn a_flipped_bit_invalidates_a_record_and_what_follows() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("j");
        let (j, _) = Journal::open(&path).unwrap();
        for i in 0..4 {
            j.append(&rec(i)).unwrap();
        }
        let mut bytes = std::fs::read(&path).unwrap();
        bytes[RECORD_BYTES + 20] ^= 1;
        std::fs::write(&path, &bytes).unwrap();
        let (_, load) = Journal::open(&path).unwrap();
        assert_eq!(load.records.len(), 1);
        assert_eq!(load.dropped_bytes, 3 * RECORD_BYTES as u64);
    }

    #[test]
    fn state_dir_is_found_again_and_broken_manifests_are_reported() {
        let dir = tempfile::tempdir().unwrap();
        let s = StateDir::for_output(dir.path(), Path::new("out.txt"));
        let again = StateDir::for_output(dir.path(), Path::new("./out.txt"));
        assert!(matches!(s.find(), Found::Nothing));
        std::fs::create_dir_all(s.path()).unwrap();
        assert!(matches!(again.find(), Found::Broken(_)), "same directory");
        s.remove().unwrap();
        assert!(!s.exists());
    }

    #[test]
    fn identify_hashes_the_whole_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("x.txt");
        let mut data: Vec<u8> = (0..(9 << 20)).map(|i| b'0' + (i % 10) as u8).collect();
        data[0] = b'7';
        data.push(b'\n');
        std::fs::write(&p, &data).unwrap();
        let op = crate::format::Operand::open(&p, None).unwrap();
        let id = identify(&p, &op).unwrap();
        assert_eq!(id.size, data.len() as u64);
        assert_eq!(id.blake3, blake3::hash(&data).to_hex().to_string());
    }
}
