//! Operand files: reading, validating and writing integers in four formats.
//!
//! | format      | radix          | sign | detected |
//! |-------------|----------------|------|----------|
//! | `decimal`   | 10^19          | yes  | yes      |
//! | `hex`       | 2^64           | yes  | yes      |
//! | `limbs`     | 2^64           | no   | never    |
//! | `container` | 2^64 or 10^19  | yes  | yes      |
//!
//! The text formats are described in [`text`], raw limbs in [`limbs`] and
//! the container byte by byte in [`container`].
//!
//! # Detection
//!
//! When no format is named, a file that starts with the container magic is a
//! container. Anything else is read as text: a body of only `0-9` is
//! decimal; a `0x`/`0X` prefix, or any of the letters `a-f`/`A-F` in an
//! otherwise valid hexadecimal body, makes it hexadecimal. Otherwise the
//! error names the first byte that is neither kind of digit.
//!
//! A consequence: a hexadecimal number that happens to use only the digits
//! `0-9`, written without the `0x` prefix, is read as *decimal*. Write it
//! with the prefix, or name the format (`--in-format hex`). Raw limbs have no
//! signature and are never detected; they must be named.
//!
//! # Reading
//!
//! Operands are read through a read-only memory map and never modified.
//! [`Operand::open`] validates the whole file up front, so every later read
//! is infallible and a bad file is rejected before any work is done.

mod blocks;
pub mod container;
pub mod limbs;
pub mod text;

use std::fs::File;
use std::io::{self, Read, Write};
use std::ops::Range;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::radix::{DEC_DIGITS_PER_LIMB, HEX_DIGITS_PER_LIMB};
use crate::{Error, Radix, Result};
use text::TextKind;

pub(crate) use blocks::digits_of_limb;
pub use blocks::{LimbFeed, Written};

/// Drops the pages of bytes `offset..offset + len` of a mapped file from
/// this process's resident memory (nothing for a file read into memory).
fn release_bytes(data: &Backing, offset: usize, len: usize) {
    let Backing::Mapped(map, _) = data else {
        return;
    };
    if len == 0 {
        return;
    }
    // SAFETY: the mapping is read-only and file-backed: dropping its pages
    // loses nothing (the next access reads them again from the file), and
    // the callers are done with these bytes.
    let _ = unsafe { map.unchecked_advise_range(memmap2::UncheckedAdvice::DontNeed, offset, len) };
}

impl crate::storage::LimbSource for Operand {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        self.read_limbs(first, out)
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.read_limbs(first, out)
    }
}

/// An operand read without keeping its pages resident: each read is
/// followed by a release of the pages it touched (out-of-core plans, and
/// checks of files larger than RAM).
pub struct Released<'a>(pub &'a Operand);

impl crate::storage::LimbSource for Released<'_> {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        if !self.0.read_limbs_positioned(first, out) {
            self.0.read_limbs(first, out);
            self.0.release_limbs(first, out.len());
        }
    }

    fn prefetch_limbs(&self, first: usize, n: usize) {
        self.0.prefetch_limbs(first, n);
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.fill_limbs(first, out)
    }
}

/// An operand file format.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// Decimal text, base-10^19 limbs.
    Decimal,
    /// Hexadecimal text, base-2^64 limbs.
    Hex,
    /// Raw little-endian base-2^64 words, no header, non-negative.
    Limbs,
    /// The self-describing binary container.
    Container,
}

impl Format {
    /// The name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Format::Decimal => "decimal",
            Format::Hex => "hex",
            Format::Limbs => "limbs",
            Format::Container => "container",
        }
    }
}

impl std::fmt::Display for Format {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

impl std::str::FromStr for Format {
    type Err = Error;

    /// Accepts `dec`, `decimal`, `hex`, `limbs` and `container`, in any case.
    fn from_str(s: &str) -> Result<Format> {
        match s.to_ascii_lowercase().as_str() {
            "dec" | "decimal" => Ok(Format::Decimal),
            "hex" => Ok(Format::Hex),
            "limbs" => Ok(Format::Limbs),
            "container" => Ok(Format::Container),
            _ => Err(Error::usage(
                format!(
                    "unknown format '{s}'; the formats are decimal (or dec), hex, limbs, container"
                ),
                "choose one of: decimal, dec, hex, limbs, container",
            )),
        }
    }
}

/// Which radixes a format can carry: decimal text only base 10^19, hex text
/// and raw limbs only base 2^64, containers either.
pub fn format_radix_compatible(format: Format, radix: Radix) -> bool {
    match format {
        Format::Decimal => radix == Radix::Decimal,
        Format::Hex | Format::Limbs => radix == Radix::Binary,
        Format::Container => true,
    }
}

/// The bytes of an operand file: mapped when possible, read otherwise.
enum Backing {
    /// The file mapped, and kept open for positional reads of released
    /// windows.
    Mapped(memmap2::Mmap, File),
    Owned(Vec<u8>),
}

impl Backing {
    fn bytes(&self) -> &[u8] {
        match self {
            Backing::Mapped(m, _) => m,
            Backing::Owned(v) => v,
        }
    }
}

impl std::fmt::Debug for Backing {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Backing::Mapped(m, _) => write!(f, "Mapped({} bytes)", m.len()),
            Backing::Owned(v) => write!(f, "Owned({} bytes)", v.len()),
        }
    }
}

fn open_error(path: &Path, e: &io::Error) -> Error {
    match e.kind() {
        // A link whose target is gone looks like a present file in a
        // listing; saying "no such file" alone would send the user in circles.
        io::ErrorKind::NotFound => match std::fs::read_link(path) {
            Ok(to) => Error::input(
                path,
                None,
                format!(
                    "is a symbolic link to {}, which does not exist",
                    to.display()
                ),
                "point the link at the operand file, or give the file's own path",
            ),
            Err(_) => Error::input(path, None, "no such file", "check the path"),
        },
        io::ErrorKind::PermissionDenied => Error::input(
            path,
            None,
            "permission denied",
            "make the file readable (for example chmod u+r), or run as a user who may read it",
        ),
        _ => Error::input(
            path,
            None,
            format!("cannot read the file: {e}"),
            "check that the path names a readable file",
        ),
    }
}

/// Maps or reads the whole file.
///
/// # Safety contract of the mapping
///
/// The mapping is read-only and private to this process, but the kernel
/// shows later changes to the file through it. The file must therefore not
/// be truncated or modified by anyone while the [`Operand`] is alive:
/// truncation makes reads of the lost pages fault (the process is killed by
/// `SIGBUS`), and modification changes the number under a computation that
/// already validated it. vastmul itself never writes to an input: outputs are
/// new files renamed into place, and [`crate::output::ensure_distinct`]
/// refuses an output path that names an input.
fn load(path: &Path) -> Result<Backing> {
    let meta = std::fs::metadata(path).map_err(|e| open_error(path, &e))?;
    if meta.is_dir() {
        return Err(Error::input(
            path,
            None,
            "is a directory, not an operand file",
            "give the path of a file",
        ));
    }
    let empty = || {
        Error::input(
            path,
            None,
            "file is empty",
            "an operand needs at least one digit; zero is written 0",
        )
    };
    let mut file = File::open(path).map_err(|e| open_error(path, &e))?;
    // A zero-length mapping is an error on most systems, and some regular
    // files (under /proc, for one) report length 0 yet have content: those
    // are read instead.
    if meta.is_file() && meta.len() > 0 {
        // SAFETY: the mapping is read-only, and nothing in vastmul writes to
        // or truncates an input file while it is mapped (see the contract in
        // this function's documentation). The bytes are only ever read as
        // plain `u8`, so any content is a valid value.
        if let Ok(map) = unsafe { memmap2::Mmap::map(&file) } {
            if map.is_empty() {
                return Err(empty());
            }
            return Ok(Backing::Mapped(map, file));
        }
    }
    // Pipes, character devices and file systems that cannot map.
    let mut data = Vec::new();
    file.read_to_end(&mut data)
        .map_err(|e| open_error(path, &e))?;
    if data.is_empty() {
        return Err(empty());
    }
    Ok(Backing::Owned(data))
}

/// Where the limbs of a validated operand are in its bytes.
#[derive(Clone, Debug)]
enum Layout {
    /// Significant decimal digits, 19 per limb.
    Decimal(Range<usize>),
    /// Significant hexadecimal digits, 16 per limb.
    Hex(Range<usize>),
    /// Significant little-endian words.
    Words(Range<usize>),
}

/// A validated, memory-mapped operand file.
///
/// All accessors are infallible: [`Operand::open`] has checked every byte.
#[derive(Debug)]
pub struct Operand {
    path: PathBuf,
    format: Format,
    radix: Radix,
    negative: bool,
    limb_count: usize,
    digit_count: u64,
    layout: Layout,
    data: Backing,
}

/// Limbs per rayon task in [`Operand::to_limbs`].
const READ_TASK_LIMBS: usize = text::PARSE_TASK_LIMBS;

/// Significant digits of a non-zero limb written in `radix`'s text form.
fn limb_digits(radix: Radix, x: u64) -> u64 {
    match radix {
        Radix::Binary => u64::from((64 - x.leading_zeros()).div_ceil(4)),
        Radix::Decimal => u64::from(x.checked_ilog10().map_or(1, |d| d + 1)),
    }
}

fn digits_per_limb(radix: Radix) -> u64 {
    match radix {
        Radix::Binary => HEX_DIGITS_PER_LIMB as u64,
        Radix::Decimal => DEC_DIGITS_PER_LIMB as u64,
    }
}

impl Operand {
    /// Opens and fully validates an operand file; `format: None` detects it
    /// (see the [module documentation](self) for the rules).
    ///
    /// Errors are [`Error::Input`] values that name the file and, for a
    /// malformed file, the byte offset of the first problem.
    ///
    /// # Safety
    ///
    /// This function is safe to call, but it memory-maps the file: the file
    /// must not be modified or truncated while the returned `Operand` is
    /// alive. Truncation would make reads fault and kill the process;
    /// modification would change the number after it was validated.
    pub fn open(path: &Path, format: Option<Format>) -> Result<Operand> {
        let data = load(path)?;
        let bytes = data.bytes();
        // Validation walks the whole file; the pages it is done with are
        // dropped from resident memory as it goes (see `release_bytes`).
        let release = |offset: usize, len: usize| release_bytes(&data, offset, len);
        let format = match format {
            Some(f) => Some(f),
            None if container::has_magic(bytes) => Some(Format::Container),
            None => None,
        };
        let (format, radix, negative, layout) = match format {
            None | Some(Format::Decimal) | Some(Format::Hex) => {
                let want = match format {
                    Some(Format::Decimal) => Some(TextKind::Decimal),
                    Some(Format::Hex) => Some(TextKind::Hex),
                    _ => None,
                };
                let t = text::scan(path, bytes, want, &release)?;
                match t.kind {
                    TextKind::Decimal => (
                        Format::Decimal,
                        Radix::Decimal,
                        t.negative,
                        Layout::Decimal(t.digits),
                    ),
                    TextKind::Hex => (
                        Format::Hex,
                        Radix::Binary,
                        t.negative,
                        Layout::Hex(t.digits),
                    ),
                }
            }
            Some(Format::Limbs) => {
                let words = limbs::scan(path, bytes)?;
                (Format::Limbs, Radix::Binary, false, Layout::Words(words))
            }
            Some(Format::Container) => {
                let c = container::scan(path, bytes, &release)?;
                (
                    Format::Container,
                    c.radix,
                    c.negative,
                    Layout::Words(c.payload),
                )
            }
        };
        let (limb_count, digit_count) = match &layout {
            Layout::Decimal(d) => (d.len().div_ceil(DEC_DIGITS_PER_LIMB), d.len() as u64),
            Layout::Hex(d) => (d.len().div_ceil(HEX_DIGITS_PER_LIMB), d.len() as u64),
            Layout::Words(w) => {
                let n = w.len() / limbs::LIMB_BYTES;
                let digits = match n {
                    0 => 0,
                    _ => {
                        let top = limbs::word(&bytes[w.clone()], n - 1);
                        (n as u64 - 1) * digits_per_limb(radix) + limb_digits(radix, top)
                    }
                };
                (n, digits)
            }
        };
        let op = Operand {
            path: path.to_path_buf(),
            format,
            radix,
            negative,
            limb_count,
            digit_count: digit_count.max(1),
            layout,
            data,
        };
        // Whatever validation left resident (leading zeros, headers) goes too.
        release_bytes(&op.data, 0, op.data.bytes().len());
        Ok(op)
    }

    /// The path the operand was opened from.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file's format, as named or detected.
    pub fn format(&self) -> Format {
        self.format
    }

    /// The radix of the limbs: decimal text is base 10^19, hex text and raw
    /// limbs base 2^64, and a container says which.
    pub fn radix(&self) -> Radix {
        self.radix
    }

    /// Whether the number is below zero. Never true for zero: `-0` is zero.
    pub fn is_negative(&self) -> bool {
        self.negative
    }

    /// Significant limbs (leading zero limbs not counted); 0 for zero.
    pub fn limb_count(&self) -> usize {
        self.limb_count
    }

    /// Significant digits in the radix's text form: decimal digits for base
    /// 10^19, hexadecimal digits for base 2^64; 1 for zero.
    pub fn digit_count(&self) -> u64 {
        self.digit_count
    }

    /// The file's length in bytes.
    pub fn file_len(&self) -> u64 {
        self.data.bytes().len() as u64
    }

    /// The whole file's bytes.
    pub(crate) fn bytes(&self) -> &[u8] {
        self.data.bytes()
    }

    /// Limbs `first..first + out.len()`, least significant first (limb 0
    /// is the least significant); positions at or past
    /// [`limb_count`](Operand::limb_count) read as 0.
    pub fn read_limbs(&self, first: usize, out: &mut [u64]) {
        let bytes = self.data.bytes();
        match &self.layout {
            Layout::Decimal(d) => text::read_dec(&bytes[d.clone()], first, out),
            Layout::Hex(d) => text::read_hex(&bytes[d.clone()], first, out),
            Layout::Words(w) => limbs::read_words(&bytes[w.clone()], first, out),
        }
    }

    /// [`Operand::read_limbs`] through a positional read of the bytes
    /// behind the limbs into a per-thread buffer, so that no page of the
    /// file is mapped into the process: released reads of short segments
    /// (a column block's rows) would otherwise fault pages in and drop
    /// them again one segment at a time, which cost several times the
    /// parsing in system time. False (nothing read) for an operand that is
    /// not a mapped file, or when the read fails; the caller then reads
    /// through the mapping.
    pub fn read_limbs_positioned(&self, first: usize, out: &mut [u64]) -> bool {
        use std::os::unix::fs::FileExt;
        thread_local! {
            static BYTES: std::cell::RefCell<Vec<u8>> = const { std::cell::RefCell::new(Vec::new()) };
        }
        let Backing::Mapped(_, file) = &self.data else {
            return false;
        };
        // Past the top only zeros (and no byte range to compute).
        let n = out.len().min(self.limb_count.saturating_sub(first));
        out[n..].fill(0);
        let out = &mut out[..n];
        if n == 0 {
            return true;
        }
        let (lo, hi) = self.limb_bytes(first, n);
        BYTES.with_borrow_mut(|buf| {
            buf.resize(hi.saturating_sub(lo), 0);
            if file.read_exact_at(buf, lo as u64).is_err() {
                return false;
            }
            // The buffer's last byte ends limb `first`: read it as limb 0.
            match &self.layout {
                Layout::Decimal(_) => text::read_dec(buf, 0, out),
                Layout::Hex(_) => text::read_hex(buf, 0, out),
                Layout::Words(_) => limbs::read_words(buf, 0, out),
            }
            true
        })
    }

    /// Tells the kernel that reads will be scattered: it then maps only the
    /// page a read touches, not its neighbours ("fault-around"), so that
    /// [`Operand::release_limbs`] really keeps the resident pages to those
    /// in use.
    pub fn expect_scattered_reads(&self) {
        if let Backing::Mapped(map, _) = &self.data {
            let _ = map.advise(memmap2::Advice::Random);
        }
    }

    /// Drops the mapped pages of the bytes behind limbs `first..first + n`
    /// from this process's resident memory. They stay in the page cache, so
    /// a later read faults them back in cheaply; out-of-core passes call this
    /// after each read so that the input's pages do not pile up in the
    /// process and count against its memory budget.
    pub fn release_limbs(&self, first: usize, n: usize) {
        let (lo, hi) = self.limb_bytes(first, n);
        if lo < hi {
            // A fault maps the neighbouring cached pages too ("fault-around",
            // 64 KiB by default), so release whole aligned 64 KiB spans.
            const AROUND: usize = 64 << 10;
            let lo = lo / AROUND * AROUND;
            let hi = hi.div_ceil(AROUND) * AROUND;
            let hi = hi.min(self.data.bytes().len());
            release_bytes(&self.data, lo, hi - lo);
        }
    }

    /// The BLAKE3 of the whole file, hashed on all threads window by
    /// window, each window's pages released from the process afterwards
    /// (so that hashing a file larger than the memory budget stays within
    /// it).
    pub fn content_hash(&self) -> blake3::Hash {
        const WINDOW: usize = 8 << 20;
        let bytes = self.data.bytes();
        let mut hasher = blake3::Hasher::new();
        for start in (0..bytes.len()).step_by(WINDOW) {
            let end = (start + WINDOW).min(bytes.len());
            hasher.update_rayon(&bytes[start..end]);
            release_bytes(&self.data, start, end - start);
        }
        hasher.finalize()
    }

    /// Starts reading the bytes behind limbs `first..first + n` into the
    /// page cache in the background, without mapping them into this process
    /// (so they do not count against its memory): read-ahead for the strided
    /// reads of the out-of-core column passes.
    pub fn prefetch_limbs(&self, first: usize, n: usize) {
        let (lo, hi) = self.limb_bytes(first, n);
        if let (Backing::Mapped(map, _), true) = (&self.data, lo < hi) {
            let _ = map.advise_range(memmap2::Advice::WillNeed, lo, hi - lo);
        }
    }

    /// The byte range of the file behind limbs `first..first + n` (clamped
    /// to the digits or words).
    fn limb_bytes(&self, first: usize, n: usize) -> (usize, usize) {
        // Limb i of text ends width*i bytes before the end of the digits; of
        // raw words it starts 8*i bytes after their start.
        match &self.layout {
            Layout::Words(w) => (w.start + 8 * first, (w.start + 8 * (first + n)).min(w.end)),
            Layout::Decimal(d) | Layout::Hex(d) => {
                let width = if matches!(self.layout, Layout::Decimal(_)) {
                    DEC_DIGITS_PER_LIMB
                } else {
                    HEX_DIGITS_PER_LIMB
                };
                (
                    d.end.saturating_sub(width * (first + n)).max(d.start),
                    d.end.saturating_sub(width * first).max(d.start),
                )
            }
        }
    }

    /// All significant limbs, least significant first, parsed in parallel.
    pub fn to_limbs(&self) -> Vec<u64> {
        let mut out = vec![0u64; self.limb_count];
        out.par_chunks_mut(READ_TASK_LIMBS)
            .enumerate()
            .for_each(|(t, chunk)| self.read_limbs(t * READ_TASK_LIMBS, chunk));
        out
    }
}

/// Writes an integer in `format`, canonically.
///
/// `limbs` are little-endian in `radix` and may carry leading zero limbs,
/// which are dropped; a negative zero is written as zero. Decimal and hex
/// text get no leading zeros, a `-` for negatives and a trailing newline;
/// raw limbs write zero as one zero word.
///
/// Fails with [`io::ErrorKind::InvalidInput`] if the format cannot carry the
/// radix (see [`format_radix_compatible`]), if a negative number is to be
/// written as raw limbs, or if a base-10^19 limb is not below 10^19.
pub fn write_operand<W: Write>(
    w: &mut W,
    format: Format,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
) -> io::Result<()> {
    let (limbs, negative) = checked_for_writing(format, radix, negative, limbs)?;
    match text_kind(format) {
        Some(kind) => {
            let fetch = blocks::SliceFeed {
                limbs,
                seen: &|_, _| {},
            };
            let shape = blocks::TextShape::new(kind, negative, limbs.len(), &fetch)?;
            blocks::write_stream(w, &shape, &fetch)
        }
        None if format == Format::Limbs => limbs::write_raw(w, limbs),
        None => container::write(w, radix, negative, limbs),
    }
}

/// The digit set of a text format.
pub(crate) fn text_kind(format: Format) -> Option<TextKind> {
    match format {
        Format::Decimal => Some(TextKind::Decimal),
        Format::Hex => Some(TextKind::Hex),
        Format::Limbs | Format::Container => None,
    }
}

/// Passes bytes on to a writer and hashes them on the way.
struct Hashing<W> {
    inner: W,
    hasher: blake3::Hasher,
    bytes: u64,
}

impl<W: Write> Write for Hashing<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hasher.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.inner.flush()
    }
}

/// [`write_operand`] into a file from its start, returning its length and
/// BLAKE3. Text is formatted on every core in blocks that an I/O thread
/// writes directly to the disk while the next is formatted. `seen` is told
/// of every significant limb once, in windows in any order, as it is
/// written.
pub fn write_operand_file(
    file: &File,
    format: Format,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
    seen: &(dyn Fn(usize, &[u64]) + Sync),
) -> io::Result<Written> {
    let (limbs, negative) = checked_for_writing(format, radix, negative, limbs)?;
    match text_kind(format) {
        Some(_) => write_text_file_from(
            file,
            format,
            radix,
            negative,
            limbs.len(),
            &blocks::SliceFeed { limbs, seen },
        ),
        None => {
            limbs
                .par_chunks(1 << 16)
                .enumerate()
                .for_each(|(i, chunk)| seen(i << 16, chunk));
            let mut w = Hashing {
                inner: io::BufWriter::with_capacity(1 << 22, file),
                hasher: blake3::Hasher::new(),
                bytes: 0,
            };
            write_operand(&mut w, format, radix, negative, limbs)?;
            w.flush()?;
            Ok(Written {
                bytes: w.bytes,
                blake3: w.hasher.finalize(),
            })
        }
    }
}

/// Writes the `len` limbs that `fetch` supplies (top limb non-zero, or
/// `len == 0` for zero) into a file as text, without holding them in RAM,
/// and returns its length and BLAKE3. Decimal and hexadecimal text only.
pub fn write_text_file_from(
    file: &File,
    format: Format,
    radix: Radix,
    negative: bool,
    len: usize,
    fetch: &dyn LimbFeed,
) -> io::Result<Written> {
    checked_for_writing(format, radix, negative, &[])?;
    let negative = negative && len > 0;
    match text_kind(format) {
        Some(kind) => {
            let shape = blocks::TextShape::new(kind, negative, len, fetch)?;
            blocks::write_file(file, &shape, fetch)
        }
        None => Err(io::Error::new(
            io::ErrorKind::Unsupported,
            "a product computed out of core is written as decimal or hexadecimal text; \
             use --out-format dec or hex",
        )),
    }
}

/// Writes a number's text into a file from its least significant limb up,
/// asking `fetch` to [`prepare`](LimbFeed::prepare) each block's limbs
/// before reading them: for a product made by a carry pass while it is
/// written. The text's length must be known: `len` significant limbs, the
/// top one with `top_digits` digits (checked when it is written).
/// Decimal and hexadecimal text only.
pub fn write_text_file_rising(
    file: &File,
    format: Format,
    radix: Radix,
    negative: bool,
    (len, top_digits): (usize, usize),
    fetch: &dyn LimbFeed,
) -> io::Result<Written> {
    checked_for_writing(format, radix, negative, &[])?;
    match text_kind(format) {
        Some(kind) => {
            let shape = blocks::TextShape::sized(kind, negative, len, top_digits);
            blocks::write_file_rising(file, &shape, fetch)
        }
        None => Err(io::Error::new(
            io::ErrorKind::Unsupported,
            "only decimal and hexadecimal text is written from the least significant limb up",
        )),
    }
}

/// Refuses what a format cannot hold; returns the limbs without leading
/// zeros and the sign (never negative for zero).
fn checked_for_writing(
    format: Format,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
) -> io::Result<(&[u64], bool)> {
    if !format_radix_compatible(format, radix) {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            format!(
                "the {} format cannot hold base-{} limbs",
                format.name(),
                radix.name()
            ),
        ));
    }
    let n = limbs.iter().rposition(|&x| x != 0).map_or(0, |i| i + 1);
    let negative = negative && n > 0;
    if format == Format::Limbs && negative {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "raw limbs cannot hold a negative number; use a container or text",
        ));
    }
    Ok((&limbs[..n], negative))
}

#[cfg(test)]
mod tests {
    /// The positional, parallel file writer must produce exactly the bytes
    /// of the sequential stream writer, across many write batches.
    #[test]
    fn file_writer_matches_stream_writer() {
        let dir = tempfile::tempdir().unwrap();
        for (radix, format, max) in [
            (Radix::Decimal, Format::Decimal, crate::radix::DEC_BASE - 1),
            (Radix::Binary, Format::Hex, u64::MAX),
        ] {
            for len in [0usize, 1, 2, (1 << 15) + 1, 33 * (1 << 15) + 7] {
                let limbs: Vec<u64> = (0..len as u64)
                    .map(|i| i.wrapping_mul(0x9e37_79b9_7f4a_7c15) % max + 1)
                    .collect();
                for negative in [false, true] {
                    let mut stream = Vec::new();
                    write_operand(&mut stream, format, radix, negative, &limbs).unwrap();
                    let path = dir.path().join("f.txt");
                    let file = File::create(&path).unwrap();
                    write_operand_file(&file, format, radix, negative, &limbs, &|_, _| {}).unwrap();
                    drop(file);
                    assert_eq!(std::fs::read(&path).unwrap(), stream, "{format} len {len}");
                }
            }
        }
    }

    use super::*;
    use crate::radix::DEC_BASE;
    use crate::rng::Rng;
    use num_bigint::BigUint;

    fn assert_send_sync<T: Send + Sync>() {}

    #[test]
    fn operand_is_send_and_sync() {
        assert_send_sync::<Operand>();
    }

    struct Files {
        dir: tempfile::TempDir,
        n: usize,
    }

    impl Files {
        fn new() -> Files {
            Files {
                dir: tempfile::tempdir().unwrap(),
                n: 0,
            }
        }

        fn put(&mut self, bytes: &[u8]) -> PathBuf {
            self.n += 1;
            let p = self.dir.path().join(format!("operand-{}", self.n));
            std::fs::write(&p, bytes).unwrap();
            p
        }

        fn open(&mut self, bytes: &[u8], format: Option<Format>) -> Result<Operand> {
            let p = self.put(bytes);
            Operand::open(&p, format)
        }
    }

    /// Opening must fail with an input error naming the file, at `offset`;
    /// returns the message for further checks.
    fn expect_error(
        files: &mut Files,
        bytes: &[u8],
        format: Option<Format>,
        offset: Option<u64>,
    ) -> String {
        let p = files.put(bytes);
        let err = Operand::open(&p, format).expect_err("opening must fail");
        let text = err.to_string();
        match &err {
            Error::Input {
                path, offset: o, ..
            } => {
                assert_eq!(path, &p, "{text}");
                assert_eq!(*o, offset, "{text}");
            }
            other => panic!("not an input error: {other}"),
        }
        assert!(text.contains(&p.display().to_string()), "{text}");
        assert!(text.contains("fix:"), "{text}");
        assert_eq!(err.exit_code(), crate::error::exit::INPUT);
        text
    }

    fn base_limbs(mut n: BigUint, base: u64) -> Vec<u64> {
        let b = BigUint::from(base);
        let zero = BigUint::default();
        let mut out = Vec::new();
        while n != zero {
            let r = &n % &b;
            out.push(r.to_u64_digits().first().copied().unwrap_or(0));
            n /= &b;
        }
        out
    }

    /// The reference limbs of a digit string, by an independent route.
    fn oracle(digits: &str, radix: Radix) -> Vec<u64> {
        match radix {
            Radix::Decimal => base_limbs(
                BigUint::parse_bytes(digits.as_bytes(), 10).unwrap(),
                DEC_BASE,
            ),
            Radix::Binary => BigUint::parse_bytes(digits.as_bytes(), 16)
                .unwrap()
                .to_u64_digits(),
        }
    }

    fn from_limbs(limbs: &[u64], radix: Radix) -> BigUint {
        let base = match radix {
            Radix::Decimal => BigUint::from(DEC_BASE),
            Radix::Binary => BigUint::from(1u8) << 64,
        };
        limbs
            .iter()
            .rev()
            .fold(BigUint::default(), |acc, &x| acc * &base + BigUint::from(x))
    }

    fn random_digits(r: &mut Rng, len: usize, hex: bool) -> String {
        let set: &[u8] = if hex {
            b"0123456789abcdefABCDEF"
        } else {
            b"0123456789"
        };
        (0..len)
            .map(|_| set[r.below(set.len() as u64) as usize] as char)
            .collect()
    }

    fn random_limbs(r: &mut Rng, n: usize, radix: Radix) -> Vec<u64> {
        let mut v: Vec<u64> = (0..n)
            .map(|_| match radix {
                Radix::Decimal => r.below(DEC_BASE),
                Radix::Binary => r.next_u64(),
            })
            .collect();
        if let Some(top) = v.last_mut() {
            if *top == 0 {
                *top = 1;
            }
        }
        v
    }

    fn write_to_vec(format: Format, radix: Radix, negative: bool, limbs: &[u64]) -> Vec<u8> {
        let mut v = Vec::new();
        write_operand(&mut v, format, radix, negative, limbs).unwrap();
        v
    }

    #[test]
    fn format_names_parse_and_serialise() {
        for f in [
            Format::Decimal,
            Format::Hex,
            Format::Limbs,
            Format::Container,
        ] {
            assert_eq!(f.name().parse::<Format>().unwrap(), f);
            assert_eq!(
                serde_json::to_string(&f).unwrap(),
                format!("\"{}\"", f.name())
            );
            let back: Format = serde_json::from_str(&format!("\"{}\"", f.name())).unwrap();
            assert_eq!(back, f);
        }
        assert_eq!("dec".parse::<Format>().unwrap(), Format::Decimal);
        assert_eq!("HEX".parse::<Format>().unwrap(), Format::Hex);
        let err = "octal".parse::<Format>().unwrap_err().to_string();
        for choice in ["decimal", "dec", "hex", "limbs", "container", "octal"] {
            assert!(err.contains(choice), "{err}");
        }
    }

    #[test]
    fn radix_compatibility() {
        assert!(format_radix_compatible(Format::Decimal, Radix::Decimal));
        assert!(!format_radix_compatible(Format::Decimal, Radix::Binary));
        assert!(format_radix_compatible(Format::Hex, Radix::Binary));
        assert!(!format_radix_compatible(Format::Hex, Radix::Decimal));
        assert!(format_radix_compatible(Format::Limbs, Radix::Binary));
        assert!(!format_radix_compatible(Format::Limbs, Radix::Decimal));
        assert!(format_radix_compatible(Format::Container, Radix::Binary));
        assert!(format_radix_compatible(Format::Container, Radix::Decimal));
        let err = write_operand(&mut Vec::new(), Format::Decimal, Radix::Binary, false, &[1])
            .unwrap_err();
        assert_eq!(err.kind(), io::ErrorKind::InvalidInput);
        let err =
            write_operand(&mut Vec::new(), Format::Limbs, Radix::Binary, true, &[1]).unwrap_err();
        assert_eq!(err.kind(), io::ErrorKind::InvalidInput);
        // Negative zero is zero, which raw limbs can hold.
        assert_eq!(
            write_to_vec(Format::Limbs, Radix::Binary, true, &[0, 0]),
            vec![0u8; 8]
        );
        let err = write_operand(
            &mut Vec::new(),
            Format::Container,
            Radix::Decimal,
            false,
            &[DEC_BASE],
        )
        .unwrap_err();
        assert_eq!(err.kind(), io::ErrorKind::InvalidInput);
        let err = write_operand(
            &mut Vec::new(),
            Format::Decimal,
            Radix::Decimal,
            false,
            &[DEC_BASE],
        )
        .unwrap_err();
        assert_eq!(err.kind(), io::ErrorKind::InvalidInput);
    }

    /// Every format, both signs, lengths around limb boundaries.
    #[test]
    fn round_trips() {
        let mut files = Files::new();
        let mut r = Rng::new(11);
        let cases = [
            (Format::Decimal, Radix::Decimal),
            (Format::Hex, Radix::Binary),
            (Format::Limbs, Radix::Binary),
            (Format::Container, Radix::Binary),
            (Format::Container, Radix::Decimal),
        ];
        for (format, radix) in cases {
            for n in [1usize, 2, 3, 4, 17, 100] {
                for negative in [false, true] {
                    if negative && format == Format::Limbs {
                        continue;
                    }
                    let limbs = random_limbs(&mut r, n, radix);
                    let mut padded = limbs.clone();
                    padded.extend([0, 0, 0]);
                    let bytes = write_to_vec(format, radix, negative, &padded);
                    let detect = match format {
                        Format::Decimal | Format::Container => None,
                        other => Some(other),
                    };
                    let op = files.open(&bytes, detect).unwrap();
                    assert_eq!(op.format(), format);
                    assert_eq!(op.radix(), radix);
                    assert_eq!(op.is_negative(), negative);
                    assert_eq!(op.limb_count(), n);
                    assert_eq!(op.file_len(), bytes.len() as u64);
                    assert_eq!(op.to_limbs(), limbs, "{format:?} {n}");
                    let mut window = [7u64; 5];
                    op.read_limbs(n - 1, &mut window);
                    assert_eq!(window, [limbs[n - 1], 0, 0, 0, 0]);
                    op.read_limbs(usize::MAX - 2, &mut window);
                    assert_eq!(window, [0; 5]);
                    // Positional reads (released windows) give the same
                    // limbs for every window, past the top too.
                    for first in 0..n + 2 {
                        for len in 0..n + 3 - first {
                            let mut a = vec![7u64; len];
                            let mut b = vec![9u64; len];
                            op.read_limbs(first, &mut a);
                            assert!(op.read_limbs_positioned(first, &mut b));
                            assert_eq!(a, b, "{format:?} {n} {first}+{len}");
                        }
                    }
                    let mut b = [9u64; 5];
                    assert!(op.read_limbs_positioned(usize::MAX - 2, &mut b));
                    assert_eq!(b, [0; 5]);

                    let value = from_limbs(&limbs, radix);
                    let text_radix = if radix == Radix::Decimal { 10 } else { 16 };
                    assert_eq!(
                        op.digit_count(),
                        value.to_str_radix(text_radix).len() as u64
                    );
                    if matches!(format, Format::Decimal | Format::Hex) {
                        // The writer's text checked against an independent one.
                        let sign = if negative { "-" } else { "" };
                        let want = format!("{sign}{}\n", value.to_str_radix(text_radix));
                        assert_eq!(String::from_utf8(bytes).unwrap(), want);
                    }
                }
            }
        }
    }

    #[test]
    fn parsed_limbs_match_reference() {
        let mut files = Files::new();
        let mut r = Rng::new(12);
        let dec_lengths = [1usize, 2, 9, 18, 19, 20, 37, 38, 39, 56, 57, 58, 200, 1000];
        let hex_lengths = [1usize, 2, 8, 15, 16, 17, 31, 32, 33, 200, 1000];
        for (lengths, hex) in [(&dec_lengths[..], false), (&hex_lengths[..], true)] {
            for &len in lengths {
                for variant in 0..4 {
                    let mut digits = random_digits(&mut r, len, hex);
                    if digits.starts_with('0') {
                        digits.replace_range(0..1, "7");
                    }
                    let zeros = if variant & 1 == 1 { "000" } else { "" };
                    let newline = match variant {
                        0 => "",
                        1 => "\n",
                        2 => "\r\n",
                        _ => "\n",
                    };
                    let sign = if variant >= 2 { "-" } else { "" };
                    let prefix = if hex && variant == 3 { "0x" } else { "" };
                    let text = format!("{sign}{prefix}{zeros}{digits}{newline}");
                    let format = if hex { Format::Hex } else { Format::Decimal };
                    let op = files.open(text.as_bytes(), Some(format)).unwrap();
                    let radix = if hex { Radix::Binary } else { Radix::Decimal };
                    let want = oracle(&digits, radix);
                    assert_eq!(op.to_limbs(), want, "{text}");
                    assert_eq!(op.limb_count(), want.len());
                    assert_eq!(op.digit_count(), len as u64);
                    assert_eq!(op.is_negative(), !sign.is_empty());
                    // Windows straddling limb boundaries.
                    for first in 0..want.len() + 2 {
                        let mut out = [0u64; 3];
                        op.read_limbs(first, &mut out);
                        for (k, &x) in out.iter().enumerate() {
                            assert_eq!(x, want.get(first + k).copied().unwrap_or(0));
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn exact_limb_boundaries() {
        let mut files = Files::new();
        let op = files.open(b"1234567890123456789", None).unwrap();
        assert_eq!(op.to_limbs(), vec![1_234_567_890_123_456_789]);
        let op = files.open(b"91234567890123456789\n", None).unwrap();
        assert_eq!(op.to_limbs(), vec![1_234_567_890_123_456_789, 9]);
        let op = files
            .open(b"10000000000000000000000000000000000000", None)
            .unwrap();
        assert_eq!(op.to_limbs(), vec![0, 10_000_000_000_000_000_000 / 10]);
        let op = files.open(b"ffffffffffffffff", Some(Format::Hex)).unwrap();
        assert_eq!(op.to_limbs(), vec![u64::MAX]);
        let op = files.open(b"0x10000000000000000", None).unwrap();
        assert_eq!(op.to_limbs(), vec![0, 1]);
        assert_eq!(op.digit_count(), 17);
    }

    #[test]
    fn zero_in_every_spelling() {
        let mut files = Files::new();
        let cases: [(&[u8], Option<Format>); 12] = [
            (b"0", None),
            (b"-0", None),
            (b"0000", None),
            (b"-000\r\n", None),
            (b"0\n", Some(Format::Decimal)),
            (b"0x0", None),
            (b"-0x00\n", None),
            (b"-0", Some(Format::Hex)),
            (
                b"00000000000000000000000000000000000000000",
                Some(Format::Hex),
            ),
            (&[0u8; 8], Some(Format::Limbs)),
            (&[0u8; 24], Some(Format::Limbs)),
            (b"-00000000000000000000000000000000000000000000000", None),
        ];
        for (bytes, format) in cases {
            let op = files.open(bytes, format).unwrap();
            assert!(!op.is_negative(), "{bytes:?}");
            assert_eq!(op.limb_count(), 0);
            assert_eq!(op.digit_count(), 1);
            assert!(op.to_limbs().is_empty());
            let mut out = [5u64; 2];
            op.read_limbs(0, &mut out);
            assert_eq!(out, [0, 0]);
        }
        for radix in [Radix::Binary, Radix::Decimal] {
            let bytes = write_to_vec(Format::Container, radix, true, &[0, 0]);
            assert_eq!(bytes.len(), container::HEADER_LEN);
            let op = files.open(&bytes, None).unwrap();
            assert_eq!(op.format(), Format::Container);
            assert_eq!(op.radix(), radix);
            assert!(!op.is_negative());
            assert_eq!((op.limb_count(), op.digit_count()), (0, 1));
        }
        assert_eq!(
            write_to_vec(Format::Decimal, Radix::Decimal, true, &[]),
            b"0\n"
        );
        assert_eq!(write_to_vec(Format::Hex, Radix::Binary, true, &[0]), b"0\n");
        assert_eq!(
            write_to_vec(Format::Limbs, Radix::Binary, false, &[]),
            vec![0u8; 8]
        );
    }

    #[test]
    fn writer_output_is_canonical() {
        assert_eq!(
            write_to_vec(Format::Decimal, Radix::Decimal, true, &[5, 42, 0, 0]),
            b"-420000000000000000005\n"
        );
        assert_eq!(
            write_to_vec(Format::Hex, Radix::Binary, false, &[0xAB, 0x1F]),
            b"1f00000000000000ab\n"
        );
        let mut files = Files::new();
        let op = files.open(b"-0X00ABCdef\r\n", None).unwrap();
        let text = write_to_vec(Format::Hex, op.radix(), op.is_negative(), &op.to_limbs());
        assert_eq!(text, b"-abcdef\n");
        let op = files.open(b"-000123\n", None).unwrap();
        let text = write_to_vec(
            Format::Decimal,
            op.radix(),
            op.is_negative(),
            &op.to_limbs(),
        );
        assert_eq!(text, b"-123\n");
    }

    #[test]
    fn detection() {
        let mut files = Files::new();
        let detect = |files: &mut Files, bytes: &[u8]| {
            let op = files.open(bytes, None).unwrap();
            (op.format(), op.radix(), op.is_negative())
        };
        assert_eq!(
            detect(&mut files, b"123"),
            (Format::Decimal, Radix::Decimal, false)
        );
        assert_eq!(
            detect(&mut files, b"-123\n"),
            (Format::Decimal, Radix::Decimal, true)
        );
        assert_eq!(
            detect(&mut files, b"12ab"),
            (Format::Hex, Radix::Binary, false)
        );
        assert_eq!(
            detect(&mut files, b"ABCDEF"),
            (Format::Hex, Radix::Binary, false)
        );
        assert_eq!(
            detect(&mut files, b"0x123"),
            (Format::Hex, Radix::Binary, false)
        );
        assert_eq!(
            detect(&mut files, b"-0X1f\r\n"),
            (Format::Hex, Radix::Binary, true)
        );
        let container = write_to_vec(Format::Container, Radix::Decimal, true, &[3]);
        assert_eq!(
            detect(&mut files, &container),
            (Format::Container, Radix::Decimal, true)
        );
        // Digits only, no prefix: decimal, as documented.
        let op = files.open(b"10", None).unwrap();
        assert_eq!(op.to_limbs(), vec![10]);
        let op = files.open(b"10", Some(Format::Hex)).unwrap();
        assert_eq!(op.to_limbs(), vec![16]);
        // Raw limbs are never detected.
        let limbs = write_to_vec(Format::Limbs, Radix::Binary, false, &[0x0102]);
        let text = expect_error(&mut files, &limbs, None, Some(0));
        assert!(text.contains("0x02"), "{text}");
    }

    #[test]
    fn io_errors_name_the_file() {
        let dir = tempfile::tempdir().unwrap();
        let missing = dir.path().join("missing.txt");
        let err = Operand::open(&missing, None).unwrap_err();
        let text = err.to_string();
        assert!(
            text.contains("missing.txt") && text.contains("no such file"),
            "{text}"
        );
        assert!(text.contains("check the path"), "{text}");
        assert!(matches!(err, Error::Input { offset: None, .. }));

        let err = Operand::open(dir.path(), None).unwrap_err();
        assert!(matches!(&err, Error::Input { offset: None, path, .. } if path == dir.path()));
        let err = err.to_string();
        assert!(err.contains("is a directory, not an operand file"), "{err}");

        let denied = open_error(&missing, &io::Error::from(io::ErrorKind::PermissionDenied));
        assert!(denied.to_string().contains("permission denied"), "{denied}");

        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let locked = dir.path().join("locked.txt");
            std::fs::write(&locked, b"12").unwrap();
            std::fs::set_permissions(&locked, std::fs::Permissions::from_mode(0o000)).unwrap();
            // A privileged user reads it anyway; only an unprivileged run can
            // observe the refusal.
            if File::open(&locked).is_err() {
                let err = Operand::open(&locked, None).unwrap_err().to_string();
                assert!(
                    err.contains("permission denied") && err.contains("locked.txt"),
                    "{err}"
                );
            }
        }
    }

    #[test]
    #[cfg(target_os = "linux")]
    fn special_files_are_read_without_mapping() {
        let err = Operand::open(Path::new("/dev/null"), None)
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("/dev/null") && err.contains("file is empty"),
            "{err}"
        );

        // Length 0 in its metadata, yet it has content: it starts with the
        // process id, then a space.
        let err = Operand::open(Path::new("/proc/self/stat"), None).unwrap_err();
        assert!(err.to_string().contains("whitespace"), "{err}");

        let dir = tempfile::tempdir().unwrap();
        let fifo = dir.path().join("pipe");
        let made = std::process::Command::new("mkfifo").arg(&fifo).status();
        if !made.is_ok_and(|s| s.success()) {
            return;
        }
        let writer = {
            let fifo = fifo.clone();
            std::thread::spawn(move || std::fs::write(fifo, b"-0x1f\n").unwrap())
        };
        let op = Operand::open(&fifo, None).unwrap();
        writer.join().unwrap();
        assert_eq!(op.format(), Format::Hex);
        assert!(op.is_negative());
        assert_eq!(op.to_limbs(), vec![0x1f]);
        assert_eq!(op.file_len(), 6);
    }

    #[test]
    fn empty_files() {
        let mut files = Files::new();
        for format in [
            None,
            Some(Format::Decimal),
            Some(Format::Hex),
            Some(Format::Limbs),
            Some(Format::Container),
        ] {
            let text = expect_error(&mut files, b"", format, None);
            assert!(text.contains("file is empty"), "{text}");
            assert!(text.contains("zero is written 0"), "{text}");
        }
    }

    #[test]
    fn text_errors_report_the_first_bad_byte() {
        let mut files = Files::new();
        let dec = Some(Format::Decimal);
        let hex = Some(Format::Hex);
        let cases: &[(&[u8], Option<Format>, u64, &str)] = &[
            (b"12A4", dec, 2, "byte 0x41 ('A') is not a decimal digit"),
            (b"12A4", dec, 2, "--in-format hex"),
            (b"12 34", None, 2, "whitespace"),
            (b"12\n34", None, 2, "line break inside"),
            (b"12\r\n34\n", dec, 2, "line break inside"),
            (b"1234\n\n", None, 4, "extra line break"),
            (b"12\r\n\r\n", None, 2, "extra line break"),
            (b"12\r", None, 2, "extra line break"),
            (b"-", None, 1, "no digits after '-'"),
            (b"-\n", dec, 1, "no digits after '-'"),
            (b"0x", None, 2, "no digits after the 0x prefix"),
            (b"-0x\r\n", hex, 3, "no digits after the 0x prefix"),
            (b"\n", None, 0, "no digits"),
            (b"+5", None, 0, "leading '+'"),
            (b"5-", None, 1, "'-' is only allowed as the first byte"),
            (b"--5", None, 1, "'-' is only allowed"),
            (b"12g4", None, 2, "neither"),
            (
                b"12g4",
                None,
                2,
                "('g') is neither a decimal nor a hexadecimal digit",
            ),
            (b"12abz", None, 4, "('z') is not a hexadecimal digit"),
            (b"12abz", None, 4, "letters a-f"),
            (b"0x12g", hex, 4, "('g') is not a hexadecimal digit"),
            (b"0x12g", None, 4, "('g') is not a hexadecimal digit"),
            (b"0x12", dec, 1, "0x prefix"),
            (b"1_000", None, 1, "separators"),
            (b"3.14", None, 1, "separators"),
            (b"\xEF\xBB\xBF12", None, 0, "byte-order mark"),
            (b"12\x00", None, 2, "byte 0x00 is neither"),
            (
                b"1\xff",
                Some(Format::Decimal),
                1,
                "byte 0xFF is not a decimal digit",
            ),
            (b"0x-5", None, 2, "'-' is only allowed"),
        ];
        for &(bytes, format, offset, needle) in cases {
            let text = expect_error(&mut files, bytes, format, Some(offset));
            assert!(
                text.contains(needle),
                "{:?}: {text}",
                String::from_utf8_lossy(bytes)
            );
        }
        let container = write_to_vec(Format::Container, Radix::Binary, false, &[1]);
        let text = expect_error(&mut files, &container, dec, Some(0));
        assert!(text.contains("container"), "{text}");
    }

    #[test]
    fn first_bad_byte_far_into_a_large_file() {
        let mut files = Files::new();
        let mut r = Rng::new(13);
        let mut body = random_digits(&mut r, 1_000_000, false).into_bytes();
        body[0] = b'4';
        let op = files.open(&body, None).unwrap();
        assert_eq!(op.format(), Format::Decimal);
        // The reference divides by 10^19 one limb at a time, quadratic in the
        // length; a slice-and-parse reading is the independent check here.
        let limbs = op.to_limbs();
        assert_eq!(limbs.len(), 1_000_000usize.div_ceil(19));
        for (i, &x) in limbs.iter().enumerate() {
            let end = body.len() - 19 * i;
            let digits = std::str::from_utf8(&body[end.saturating_sub(19)..end]).unwrap();
            assert_eq!(x, digits.parse::<u64>().unwrap(), "limb {i}");
        }
        body[900_000] = b'#';
        body[700_001] = b'!';
        body[700_002] = b'?';
        let text = expect_error(&mut files, &body, None, Some(700_001));
        assert!(text.contains("('!')"), "{text}");
        let text = expect_error(&mut files, &body, Some(Format::Decimal), Some(700_001));
        assert!(text.contains("('!')"), "{text}");
        // A late letter switches detection to hexadecimal, and an even later
        // non-hexadecimal byte is then the error.
        let mut body = vec![b'1'; 500_000];
        body[300_000] = b'c';
        body[450_000] = b'q';
        let text = expect_error(&mut files, &body, None, Some(450_000));
        assert!(text.contains("('q') is not a hexadecimal digit"), "{text}");
        body[450_000] = b'd';
        let op = files.open(&body, None).unwrap();
        assert_eq!(op.format(), Format::Hex);
        assert_eq!(op.digit_count(), 500_000);
    }

    #[test]
    fn large_round_trip_across_write_batches() {
        // More limbs than one batch of formatting tasks, so batch and task
        // boundaries are both crossed.
        let mut files = Files::new();
        let mut r = Rng::new(14);
        for (format, radix) in [
            (Format::Decimal, Radix::Decimal),
            (Format::Hex, Radix::Binary),
        ] {
            let limbs = random_limbs(&mut r, (1 << 15) * 33 + 7, radix);
            let bytes = write_to_vec(format, radix, true, &limbs);
            let width = if radix == Radix::Decimal { 19 } else { 16 };
            assert!(bytes.len() <= 1 + width * limbs.len() + 1);
            assert!(bytes.len() > 1 + width * (limbs.len() - 1) + 1);
            let op = files.open(&bytes, Some(format)).unwrap();
            assert!(op.is_negative());
            assert_eq!(op.to_limbs(), limbs);
            // Spot-check the text itself against an independent formatter.
            let tail = &bytes[bytes.len() - 1 - width..bytes.len() - 1];
            let want = match radix {
                Radix::Decimal => format!("{:019}", limbs[0]),
                Radix::Binary => format!("{:016x}", limbs[0]),
            };
            assert_eq!(tail, want.as_bytes());
        }
    }

    #[test]
    fn raw_limb_errors() {
        let mut files = Files::new();
        let text = expect_error(&mut files, &[1u8; 21], Some(Format::Limbs), Some(16));
        assert!(text.contains("multiple of 8"), "{text}");
        let text = expect_error(&mut files, &[1u8; 3], Some(Format::Limbs), Some(0));
        assert!(text.contains("multiple of 8"), "{text}");
        let op = files.open(b"12345678", Some(Format::Limbs)).unwrap();
        assert_eq!(op.to_limbs(), vec![u64::from_le_bytes(*b"12345678")]);
    }

    /// A container with arbitrary header fields and a correct hash.
    fn craft(version: u16, radix: u8, sign: u8, count: u64, payload_limbs: &[u64]) -> Vec<u8> {
        let mut payload = Vec::new();
        for x in payload_limbs {
            payload.extend_from_slice(&x.to_le_bytes());
        }
        let mut v = Vec::new();
        v.extend_from_slice(&container::MAGIC);
        v.extend_from_slice(&version.to_le_bytes());
        v.push(radix);
        v.push(sign);
        v.extend_from_slice(&[0; 4]);
        v.extend_from_slice(&count.to_le_bytes());
        v.extend_from_slice(&64u64.to_le_bytes());
        v.extend_from_slice(blake3::hash(&payload).as_bytes());
        v.extend_from_slice(&payload);
        v
    }

    #[test]
    fn container_header_matches_the_documented_layout() {
        let bytes = write_to_vec(Format::Container, Radix::Decimal, true, &[7, 9, 0]);
        assert_eq!(bytes, craft(1, 1, 1, 2, &[7, 9]));
        assert_eq!(&bytes[..8], b"VASTINT\0");
        assert_eq!(bytes.len(), 64 + 16);
    }

    #[test]
    fn container_errors() {
        let mut files = Files::new();
        let c = Some(Format::Container);
        let good = craft(1, 0, 0, 3, &[1, 2, 3]);
        files.open(&good, None).unwrap();
        files.open(&good, c).unwrap();

        let text = expect_error(&mut files, b"12345", c, Some(0));
        assert!(text.contains("magic"), "{text}");

        let text = expect_error(&mut files, &good[..18], None, Some(18));
        assert!(text.contains("header is truncated"), "{text}");

        let text = expect_error(
            &mut files,
            &good[..good.len() - 3],
            None,
            Some(good.len() as u64 - 3),
        );
        assert!(text.contains("truncated"), "{text}");

        let mut longer = good.clone();
        longer.extend_from_slice(&[0; 8]);
        let text = expect_error(&mut files, &longer, None, Some(good.len() as u64));
        assert!(text.contains("unexpected bytes"), "{text}");

        let text = expect_error(&mut files, &craft(2, 0, 0, 3, &[1, 2, 3]), None, Some(8));
        assert!(text.contains("version 2 is not supported"), "{text}");

        let text = expect_error(&mut files, &craft(1, 7, 0, 3, &[1, 2, 3]), None, Some(10));
        assert!(text.contains("radix code 7"), "{text}");

        let text = expect_error(&mut files, &craft(1, 0, 2, 3, &[1, 2, 3]), None, Some(11));
        assert!(text.contains("sign code 2"), "{text}");

        let mut reserved = good.clone();
        reserved[13] = 1;
        let text = expect_error(&mut files, &reserved, None, Some(13));
        assert!(text.contains("reserved"), "{text}");

        let mut offset = good.clone();
        offset[24] = 72;
        let text = expect_error(&mut files, &offset, None, Some(24));
        assert!(text.contains("payload offset"), "{text}");

        let mut huge = good.clone();
        huge[16..24].copy_from_slice(&u64::MAX.to_le_bytes());
        let text = expect_error(&mut files, &huge, None, Some(good.len() as u64));
        assert!(text.contains("truncated"), "{text}");

        for at in [64, 70, good.len() - 1] {
            let mut flipped = good.clone();
            flipped[at] ^= 0x10;
            let text = expect_error(&mut files, &flipped, None, Some(32));
            assert!(
                text.contains("payload hash mismatch: file is corrupt"),
                "{text}"
            );
        }
        let mut bad_hash = good.clone();
        bad_hash[40] ^= 1;
        let text = expect_error(&mut files, &bad_hash, None, Some(32));
        assert!(text.contains("payload hash mismatch"), "{text}");

        let text = expect_error(&mut files, &craft(1, 1, 1, 0, &[]), None, Some(11));
        assert!(text.contains("negative zero"), "{text}");

        let text = expect_error(
            &mut files,
            &craft(1, 0, 0, 3, &[1, 2, 0]),
            None,
            Some(64 + 16),
        );
        assert!(text.contains("most significant limb is zero"), "{text}");

        let text = expect_error(
            &mut files,
            &craft(1, 1, 0, 3, &[1, DEC_BASE, 3]),
            None,
            Some(64 + 8),
        );
        assert!(text.contains("not below 10^19"), "{text}");
        // The same limbs are fine in base 2^64.
        files
            .open(&craft(1, 0, 0, 3, &[1, DEC_BASE, 3]), None)
            .unwrap();
    }

    #[test]
    fn container_decimal_limb_check_finds_the_first_in_a_large_payload() {
        let mut files = Files::new();
        let mut limbs = vec![DEC_BASE - 1; 100_000];
        limbs[70_000] = DEC_BASE + 5;
        limbs[90_000] = u64::MAX;
        let bytes = craft(1, 1, 0, limbs.len() as u64, &limbs);
        expect_error(&mut files, &bytes, None, Some(64 + 8 * 70_000));
    }
}
