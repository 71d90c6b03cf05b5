//! Atomic output files.
//!
//! A product can take hours to compute; a crash, a full disk or Ctrl-C must
//! never leave a truncated file at the target path that looks like a result.
//! Everything is therefore written to a hidden temporary file beside the
//! target (same directory, so the same file system, so `rename` is atomic)
//! and moved into place only once it is complete and on disk.

use std::fs::{File, OpenOptions};
use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::{Error, Result};

/// Distinguishes temporary files made by one process; the process id in the
/// name distinguishes processes.
static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

/// An output file that appears at its target path only on [`commit`].
///
/// Dropping it without committing removes the temporary file, so an error
/// anywhere leaves nothing at the target path (and an existing file there,
/// overwritten with `force`, stays intact until the very end).
///
/// [`commit`]: AtomicOutput::commit
#[derive(Debug)]
pub struct AtomicOutput {
    target: PathBuf,
    dir: PathBuf,
    temp: PathBuf,
    file: Option<File>,
    force: bool,
}

impl AtomicOutput {
    /// Checks the target and creates a temporary file beside it.
    ///
    /// Fails with [`Error::Output`] when the parent directory is missing, the
    /// target is a directory, the target exists and `force` is false, or the
    /// directory is not writable.
    pub fn create(target: &Path, force: bool) -> Result<AtomicOutput> {
        let name = match target.file_name() {
            Some(name) => name.to_owned(),
            None => {
                return Err(Error::output(
                    target,
                    "does not name a file",
                    "give a file name, for example product.txt",
                ))
            }
        };
        let dir = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        match std::fs::metadata(&dir) {
            Ok(m) if m.is_dir() => {}
            Ok(_) => {
                return Err(Error::output(
                    target,
                    format!("{} is not a directory", dir.display()),
                    "choose an output path inside an existing directory",
                ))
            }
            Err(_) => {
                return Err(Error::output(
                    target,
                    format!("directory {} does not exist", dir.display()),
                    "create the directory first, or choose another output path",
                ))
            }
        }
        if let Ok(m) = std::fs::metadata(target) {
            if m.is_dir() {
                return Err(Error::output(
                    target,
                    "is a directory",
                    "give a file path for the output, not a directory",
                ));
            }
        }
        if !force && std::fs::symlink_metadata(target).is_ok() {
            return Err(exists_error(target));
        }

        remove_stale_partials(&dir, &name);
        let pid = std::process::id();
        loop {
            let n = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
            let mut temp_name = std::ffi::OsString::from(".");
            temp_name.push(&name);
            temp_name.push(format!(".vastmul-partial-{pid}-{n}"));
            let temp = dir.join(temp_name);
            match OpenOptions::new().write(true).create_new(true).open(&temp) {
                Ok(file) => {
                    return Ok(AtomicOutput {
                        target: target.to_path_buf(),
                        dir,
                        temp,
                        file: Some(file),
                        force,
                    })
                }
                // A leftover from a killed run with a recycled pid: pick
                // the next name rather than clobbering someone's file.
                Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
                Err(e) if e.kind() == io::ErrorKind::PermissionDenied => {
                    return Err(Error::output(
                        target,
                        format!(
                            "cannot create files in {}: permission denied",
                            dir.display()
                        ),
                        "choose an output path in a writable directory",
                    ))
                }
                // The temporary name is ours, not the user's: the message
                // names the target they asked for and the directory at fault.
                Err(e) => {
                    let fix = if e.raw_os_error() == Some(libc::EROFS) {
                        "the file system there is mounted read-only: choose an output path on a writable one"
                    } else {
                        "choose an output path in a writable directory on a disk with room"
                    };
                    return Err(Error::output(
                        target,
                        format!("cannot create files in {}: {e}", dir.display()),
                        fix,
                    ));
                }
            }
        }
    }

    /// Where the data goes until [`commit`](AtomicOutput::commit).
    pub fn temp_path(&self) -> &Path {
        &self.temp
    }

    /// The final path.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// The temporary file, for writing.
    pub fn file(&mut self) -> &mut File {
        self.file
            .as_mut()
            .expect("the file is only taken by commit, which consumes self")
    }

    /// Flushes the file to disk, moves it over the target and flushes the
    /// directory, so that after a crash the target holds either the old
    /// content or the whole new one.
    ///
    /// Without `force`, a target that appeared since [`create`] is not
    /// overwritten: the commit fails and the temporary file is removed.
    ///
    /// [`create`]: AtomicOutput::create
    pub fn commit(mut self) -> Result<()> {
        let file = self.file.take().expect("commit runs once");
        file.sync_all().map_err(|e| Error::io(&self.temp, e))?;
        drop(file);
        if self.force {
            std::fs::rename(&self.temp, &self.target).map_err(|e| Error::io(&self.target, e))?;
        } else {
            // A hard link fails if the target exists, closing the window
            // between the check in `create` and now. File systems without
            // hard links fall back to a checked rename.
            match std::fs::hard_link(&self.temp, &self.target) {
                Ok(()) => {
                    // The data is safe under the target name; a failure to
                    // unlink the temporary name only leaves a hidden file.
                    let _ = std::fs::remove_file(&self.temp);
                }
                Err(e) if e.kind() == io::ErrorKind::AlreadyExists => {
                    return Err(exists_error(&self.target));
                }
                Err(_) => {
                    if std::fs::symlink_metadata(&self.target).is_ok() {
                        return Err(exists_error(&self.target));
                    }
                    std::fs::rename(&self.temp, &self.target)
                        .map_err(|e| Error::io(&self.target, e))?;
                }
            }
        }
        // The temporary name is gone now; nothing is left for Drop.
        self.temp = PathBuf::new();
        sync_dir(&self.dir);
        Ok(())
    }
}

impl Drop for AtomicOutput {
    fn drop(&mut self) {
        if !self.temp.as_os_str().is_empty() {
            self.file = None;
            let _ = std::fs::remove_file(&self.temp);
        }
    }
}

fn exists_error(target: &Path) -> Error {
    Error::output(
        target,
        "exists",
        "pass --force to overwrite, or choose another path",
    )
}

/// Removes the temporary files that killed runs left for this target:
/// files named `.NAME.vastmul-partial-PID-N` (our own naming, never a
/// user's file) whose process no longer exists. A process that was killed
/// with SIGKILL cannot clean up after itself.
fn remove_stale_partials(dir: &Path, name: &std::ffi::OsStr) {
    let mut prefix = std::ffi::OsString::from(".");
    prefix.push(name);
    prefix.push(".vastmul-partial-");
    let prefix = prefix.to_string_lossy().into_owned();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let file_name = entry.file_name();
        let Some(rest) = file_name.to_str().and_then(|f| f.strip_prefix(&prefix)) else {
            continue;
        };
        let Some(pid) = rest.split('-').next().and_then(|p| p.parse::<i32>().ok()) else {
            continue;
        };
        // SAFETY: kill with signal 0 sends nothing; it only reports whether
        // the process exists.
        let gone = unsafe { libc::kill(pid, 0) } != 0
            && io::Error::last_os_error().raw_os_error() == Some(libc::ESRCH);
        if gone {
            let _ = std::fs::remove_file(entry.path());
        }
    }
}

/// Makes the rename durable. Directories cannot be opened for syncing on
/// every platform; the rename itself has already happened, so failing here
/// would only report an error for a result that is in place.
fn sync_dir(dir: &Path) {
    if let Ok(d) = File::open(dir) {
        let _ = d.sync_all();
    }
}

/// Refuses an output path that names the same file as one of `inputs`.
///
/// Inputs are memory-mapped while the product is written; writing over one
/// would corrupt the computation as well as destroy the input. Paths are
/// compared after canonicalisation, and on Unix also by device and inode so
/// that hard links are caught.
pub fn ensure_distinct(target: &Path, inputs: &[&Path]) -> Result<()> {
    // A target that does not exist cannot be any existing input.
    let Ok(target_meta) = std::fs::metadata(target) else {
        return Ok(());
    };
    let target_canon = std::fs::canonicalize(target).ok();
    for input in inputs {
        let same_path = match (&target_canon, std::fs::canonicalize(input)) {
            (Some(t), Ok(i)) => *t == i,
            _ => false,
        };
        let same_inode = match std::fs::metadata(input) {
            Ok(m) => same_file(&target_meta, &m),
            Err(_) => false,
        };
        if same_path || same_inode {
            return Err(Error::output(
                target,
                format!("is the same file as the input {}", input.display()),
                "choose a different output path; inputs are never overwritten",
            ));
        }
    }
    Ok(())
}

#[cfg(unix)]
fn same_file(a: &std::fs::Metadata, b: &std::fs::Metadata) -> bool {
    use std::os::unix::fs::MetadataExt;
    a.dev() == b.dev() && a.ino() == b.ino()
}

#[cfg(not(unix))]
fn same_file(_: &std::fs::Metadata, _: &std::fs::Metadata) -> bool {
    false
}

/// Asks the kernel to start writing `len` bytes at `offset` of `file` to
/// disk now, without waiting. Writing a large product back while the rest
/// is still being formatted leaves less for the final fsync to wait for.
/// Advice only: errors are ignored, and the final fsync still decides.
pub fn start_writeback(file: &File, offset: u64, len: u64) {
    #[cfg(target_os = "linux")]
    {
        use std::os::fd::AsRawFd;
        // SAFETY: sync_file_range only reads its integer arguments; the file
        // descriptor is valid for the duration of the borrow of `file`.
        unsafe {
            libc::sync_file_range(
                file.as_raw_fd(),
                offset as libc::off64_t,
                len as libc::off64_t,
                libc::SYNC_FILE_RANGE_WRITE,
            );
        }
    }
    #[cfg(not(target_os = "linux"))]
    let _ = (file, offset, len);
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    fn entries(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn commit_renames_into_place() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        let mut out = AtomicOutput::create(&target, false).unwrap();
        let temp = out.temp_path().to_path_buf();
        assert_eq!(temp.parent(), Some(dir.path()));
        let temp_name = temp.file_name().unwrap().to_string_lossy().into_owned();
        assert!(
            temp_name.starts_with(".out.txt.vastmul-partial-"),
            "{temp_name}"
        );
        out.file().write_all(b"123\n").unwrap();
        assert!(!target.exists());
        out.commit().unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"123\n");
        assert!(!temp.exists());
        assert_eq!(entries(dir.path()), vec!["out.txt"]);
    }

    #[test]
    fn drop_without_commit_removes_temp() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        let mut out = AtomicOutput::create(&target, false).unwrap();
        out.file().write_all(b"partial").unwrap();
        let temp = out.temp_path().to_path_buf();
        assert!(temp.exists());
        drop(out);
        assert!(!temp.exists());
        assert!(!target.exists());
        assert!(entries(dir.path()).is_empty());
    }

    #[test]
    fn refuses_existing_without_force() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        std::fs::write(&target, b"old").unwrap();
        let err = AtomicOutput::create(&target, false).unwrap_err();
        let text = err.to_string();
        assert!(text.contains("out.txt"), "{text}");
        assert!(text.contains("--force"), "{text}");
        assert!(matches!(err, Error::Output { .. }));
        assert_eq!(std::fs::read(&target).unwrap(), b"old");
        assert_eq!(entries(dir.path()), vec!["out.txt"]);

        let mut out = AtomicOutput::create(&target, true).unwrap();
        out.file().write_all(b"new").unwrap();
        // Until commit, the old content is untouched.
        assert_eq!(std::fs::read(&target).unwrap(), b"old");
        out.commit().unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        assert_eq!(entries(dir.path()), vec!["out.txt"]);
    }

    #[test]
    fn target_appearing_before_commit_is_not_clobbered() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        let mut out = AtomicOutput::create(&target, false).unwrap();
        out.file().write_all(b"new").unwrap();
        std::fs::write(&target, b"someone else's").unwrap();
        let err = out.commit().unwrap_err();
        assert!(err.to_string().contains("exists"));
        assert_eq!(std::fs::read(&target).unwrap(), b"someone else's");
        assert_eq!(entries(dir.path()), vec!["out.txt"]);
    }

    #[test]
    fn missing_parent_and_directory_target() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("nope").join("out.txt");
        let err = AtomicOutput::create(&target, true).unwrap_err();
        let text = err.to_string();
        assert!(
            text.contains("does not exist") && text.contains("out.txt"),
            "{text}"
        );

        let err = AtomicOutput::create(dir.path(), true).unwrap_err();
        assert!(err.to_string().contains("is a directory"), "{err}");
    }

    #[test]
    fn relative_target_in_current_directory() {
        // A bare file name has an empty parent; it must mean ".".
        let out = AtomicOutput::create(Path::new("vastmul-unit-test-never-committed"), false);
        let out = out.unwrap();
        assert!(out.temp_path().starts_with("."));
        let temp = out.temp_path().to_path_buf();
        drop(out);
        assert!(!temp.exists());
    }

    #[test]
    fn distinct_paths() {
        let dir = tempfile::tempdir().unwrap();
        let a = dir.path().join("a.txt");
        let b = dir.path().join("b.txt");
        std::fs::write(&a, b"1").unwrap();
        std::fs::write(&b, b"2").unwrap();
        let out = dir.path().join("out.txt");
        ensure_distinct(&out, &[&a, &b]).unwrap();
        std::fs::write(&out, b"x").unwrap();
        ensure_distinct(&out, &[&a, &b]).unwrap();

        let err = ensure_distinct(&a, &[&a, &b]).unwrap_err();
        assert!(err.to_string().contains("same file"), "{err}");

        // The same file through a different spelling of the path.
        let dotted = dir.path().join(".").join("b.txt");
        assert!(ensure_distinct(&dotted, &[&a, &b]).is_err());

        let link = dir.path().join("hard.txt");
        std::fs::hard_link(&a, &link).unwrap();
        let err = ensure_distinct(&link, &[&a]).unwrap_err();
        assert!(err.to_string().contains("hard.txt"), "{err}");
    }
}
