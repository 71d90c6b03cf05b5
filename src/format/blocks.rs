//! A number's text written in blocks: formatted on every core, hashed on
//! the way, and handed to a writer thread that writes it with `O_DIRECT`
//! while the next block is formatted.
//!
//! The text of a product can be as large as the product itself (128 MiB of
//! hexadecimal for a 2^30-bit product). Written through the page cache, it
//! costs fresh page-cache memory, a copy, and an fsync that then writes it
//! all; written directly from a few reused, aligned buffers, the disk works
//! while the cores format, and the fsync at commit finds nothing to write.
//! Where the file system refuses direct I/O (tmpfs, some network file
//! systems) the same blocks go through the page cache, with write-back
//! started after each.
//!
//! Every byte's place is known in advance ([`TextShape`]): the sign and the
//! top limb's digits (the head), then each lower limb at a fixed width, most
//! significant first, then a newline. So any byte range can be formatted on
//! its own, blocks can be aligned to the file's offsets, and the tasks of a
//! block never depend on each other.

use std::fs::File;
use std::io::{self, Write};
use std::sync::mpsc;

use rayon::prelude::*;

use super::text::{put_limb, put_limbs_desc, TextKind};

/// The limbs of a number being written.
pub trait LimbFeed: Sync {
    /// Limbs `first..first + out.len()`. A limb whose text straddles two
    /// blocks is read for each.
    fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()>;

    /// Limbs `first..first + limbs.len()` are being written: called once
    /// for each limb of the number, windows in any order and from many
    /// threads (for taps and progress).
    fn seen(&self, _first: usize, _limbs: &[u64]) {}

    /// Limbs below `end` are about to be read. A writer in rising order
    /// ([`write_file_rising`]) calls this before each block, with `end`
    /// never falling, so that a feed can make its limbs as they are
    /// needed, from the least significant up.
    fn prepare(&self, _end: usize) -> io::Result<()> {
        Ok(())
    }
}

/// A [`LimbFeed`] over limbs in memory.
pub(crate) struct SliceFeed<'a> {
    pub limbs: &'a [u64],
    /// Told of the limbs as they are written.
    pub seen: &'a (dyn Fn(usize, &[u64]) + Sync),
}

impl LimbFeed for SliceFeed<'_> {
    fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()> {
        out.copy_from_slice(&self.limbs[first..first + out.len()]);
        Ok(())
    }

    fn seen(&self, first: usize, limbs: &[u64]) {
        (self.seen)(first, limbs)
    }
}

type Fetch<'a> = &'a dyn LimbFeed;

/// Bytes per write. Direct writes of 1 MiB ran the development disk at its
/// full sequential rate (`dd oflag=direct`: 2.0 GB/s, against 1.4 GB/s at
/// 256 KiB), and a multiple of 4096 suits every logical block size.
pub(crate) const BLOCK_BYTES: usize = 1 << 20;

/// Buffers in the pipeline: one formatted, one queued, one being written.
pub(crate) const BLOCK_BUFFERS: usize = 3;

/// Alignment of direct I/O buffers, offsets and lengths.
const ALIGN: usize = 4096;

/// Bytes formatted by one task within a block: eight tasks a block keep
/// two cores balanced and the limbs a task fetches small.
const TASK_BYTES: usize = BLOCK_BYTES / 8;

/// Where each byte of a number's text lies.
pub(crate) struct TextShape {
    /// The sign goes first.
    negative: bool,
    /// Digits of the top limb without leading zeros (1 for zero).
    top_digits: usize,
    /// Limbs below the top one.
    lower: usize,
    /// The number is zero (no limbs).
    zero: bool,
    kind: TextKind,
}

/// Limb `index` does not fit the radix the text is written in.
pub(crate) fn bad_limb(index: usize, value: u64) -> io::Error {
    io::Error::new(
        io::ErrorKind::InvalidInput,
        format!("limb {index} is {value}, which is not below 10^19: not a decimal limb"),
    )
}

/// The digits of `x` in `kind` without leading zeros (1 for zero), or
/// `None` when `x` is no limb of that radix.
pub(crate) fn digits_of_limb(kind: TextKind, x: u64) -> Option<usize> {
    let mut digits = [0u8; 32];
    let width = kind.width();
    put_limb(kind, &mut digits[..width], x).then(|| significant(&digits[..width]))
}

/// Digits of a limb's fixed-width text without its leading zeros (1 for
/// zero).
fn significant(digits: &[u8]) -> usize {
    let width = digits.len();
    width - digits.iter().position(|&b| b != b'0').unwrap_or(width - 1)
}

impl TextShape {
    /// The shape of the text of the `len` limbs that `fetch` supplies (top
    /// limb non-zero, or `len == 0` for zero).
    pub(crate) fn new(
        kind: TextKind,
        negative: bool,
        len: usize,
        fetch: Fetch<'_>,
    ) -> io::Result<TextShape> {
        if len == 0 {
            return Ok(TextShape::sized(kind, false, 0, 1));
        }
        let mut top = [0u64];
        fetch.read(len - 1, &mut top)?;
        let digits = digits_of_limb(kind, top[0]).ok_or_else(|| bad_limb(len - 1, top[0]))?;
        Ok(TextShape::sized(kind, negative, len, digits))
    }

    /// The shape of the text of `len` limbs whose top limb has
    /// `top_digits` digits, known before the limbs are: the head is
    /// formatted when its bytes are, and checked against `top_digits`.
    pub(crate) fn sized(kind: TextKind, negative: bool, len: usize, top_digits: usize) -> Self {
        assert!((1..=kind.width()).contains(&top_digits));
        TextShape {
            negative: negative && len > 0,
            top_digits,
            lower: len.saturating_sub(1),
            zero: len == 0,
            kind,
        }
    }

    /// Bytes of the sign and the top limb's digits.
    fn head_len(&self) -> usize {
        self.negative as usize + self.top_digits
    }

    /// Limbs the text holds.
    fn limbs(&self) -> usize {
        if self.zero {
            0
        } else {
            self.lower + 1
        }
    }

    /// One past the highest limb that bytes from `offset` on need.
    pub(crate) fn limbs_from(&self, offset: u64) -> usize {
        let head = self.head_len() as u64;
        if offset < head {
            return self.limbs();
        }
        let k0 = ((offset - head) / self.kind.width() as u64) as usize;
        self.lower.saturating_sub(k0)
    }

    /// The head's bytes: the sign and the top limb, read from `fetch` and
    /// reported seen when `report`.
    fn head(&self, fetch: Fetch<'_>, report: bool) -> io::Result<Vec<u8>> {
        if self.zero {
            return Ok(b"0".to_vec());
        }
        let mut top = [0u64];
        fetch.read(self.lower, &mut top)?;
        let width = self.kind.width();
        let mut digits = [0u8; 32];
        if !put_limb(self.kind, &mut digits[..width], top[0]) {
            return Err(bad_limb(self.lower, top[0]));
        }
        if significant(&digits[..width]) != self.top_digits {
            return Err(io::Error::other(format!(
                "the top limb ({}) does not have the {} digits its text was laid out for",
                top[0], self.top_digits
            )));
        }
        if report {
            fetch.seen(self.lower, &top);
        }
        let mut head = Vec::with_capacity(self.head_len());
        if self.negative {
            head.push(b'-');
        }
        head.extend_from_slice(&digits[width - self.top_digits..width]);
        Ok(head)
    }

    /// Bytes of the whole text, newline included.
    pub(crate) fn total(&self) -> u64 {
        (self.head_len() + self.lower * self.kind.width() + 1) as u64
    }

    /// Formats bytes `start..start + dst.len()` of the text into `dst`
    /// (which must lie within [`total`](TextShape::total)), fetching the
    /// limbs they need into `limbs`.
    pub(crate) fn fill(
        &self,
        start: u64,
        dst: &mut [u8],
        fetch: Fetch<'_>,
        limbs: &mut Vec<u64>,
    ) -> io::Result<()> {
        let end = start + dst.len() as u64;
        debug_assert!(end <= self.total());
        let head = self.head_len() as u64;
        if start < head {
            // The head's limb is reported by the range that holds byte 0.
            let bytes = self.head(fetch, start == 0)?;
            let e = end.min(head);
            dst[..(e - start) as usize].copy_from_slice(&bytes[start as usize..e as usize]);
        }
        let width = self.kind.width();
        let w = width as u64;
        let body_end = head + self.lower as u64 * w;
        let (bs, be) = (start.max(head), end.min(body_end));
        if bs < be {
            // Lower limbs in text order: position k is limb `lower - 1 - k`.
            let k0 = ((bs - head) / w) as usize;
            let k1 = (be - head).div_ceil(w) as usize;
            let lo = self.lower - k1;
            limbs.resize(k1 - k0, 0);
            fetch.read(lo, limbs)?;
            // The first position whose text starts in this range: the limbs
            // from there on are this range's to report, and (up to the
            // range's end) whole in it.
            let whole_from = (bs - head).div_ceil(w) as usize;
            fetch.seen(lo, &limbs[..k1 - whole_from]);
            // Positions k0..k1: a limb cut by the range's start, a run of
            // whole ones formatted together, a limb cut by its end.
            let whole_to = (((end - head) / w) as usize).clamp(whole_from, k1);
            let limb_at = |k: usize| limbs[k1 - 1 - k];
            let mut partial = [0u8; 32];
            for k in (k0..whole_from).chain(whole_to..k1) {
                let (x, at) = (limb_at(k), head + k as u64 * w);
                if !put_limb(self.kind, &mut partial[..width], x) {
                    return Err(bad_limb(self.lower - 1 - k, x));
                }
                let (s, e) = (at.max(start), (at + w).min(end));
                dst[(s - start) as usize..(e - start) as usize]
                    .copy_from_slice(&partial[(s - at) as usize..(e - at) as usize]);
            }
            if whole_from < whole_to {
                let o = (head + whole_from as u64 * w - start) as usize;
                let run = &mut dst[o..o + (whole_to - whole_from) * width];
                // limbs[k1 - whole_to..k1 - whole_from], highest first
                let desc = &limbs[k1 - whole_to..k1 - whole_from];
                if let Err(i) = put_limbs_desc(self.kind, run, desc) {
                    let k = k1 - 1 - (k1 - whole_to + i);
                    return Err(bad_limb(self.lower - 1 - k, desc[i]));
                }
            }
        }
        if (start..end).contains(&body_end) {
            dst[(body_end - start) as usize] = b'\n';
        }
        Ok(())
    }

    /// Formats `dst` (bytes from `start`) in parallel tasks.
    fn fill_parallel(&self, start: u64, dst: &mut [u8], fetch: Fetch<'_>) -> io::Result<()> {
        dst.par_chunks_mut(TASK_BYTES)
            .enumerate()
            .try_for_each_init(Vec::new, |limbs, (i, chunk)| {
                self.fill(start + (i * TASK_BYTES) as u64, chunk, fetch, limbs)
            })
    }
}

/// What was written: the file's length and its BLAKE3.
#[derive(Clone, Copy, Debug)]
pub struct Written {
    /// Bytes in the file.
    pub bytes: u64,
    /// BLAKE3 of those bytes.
    pub blake3: blake3::Hash,
}

/// Writes the whole text to `out` in order, one block at a time.
pub(crate) fn write_stream<W: Write>(
    out: &mut W,
    shape: &TextShape,
    fetch: Fetch<'_>,
) -> io::Result<()> {
    let total = shape.total();
    let mut block = vec![0u8; BLOCK_BYTES.min(total as usize)];
    let mut offset = 0u64;
    while offset < total {
        let n = (total - offset).min(BLOCK_BYTES as u64) as usize;
        shape.fill_parallel(offset, &mut block[..n], fetch)?;
        out.write_all(&block[..n])?;
        offset += n as u64;
    }
    Ok(())
}

/// A buffer whose usable part starts on an [`ALIGN`] boundary, as direct
/// I/O requires; plain memory, so no unsafe code is needed to get it.
struct AlignedBlock {
    memory: Vec<u8>,
    start: usize,
}

impl AlignedBlock {
    fn new() -> AlignedBlock {
        let memory = vec![0u8; BLOCK_BYTES + ALIGN];
        let start = memory.as_ptr().align_offset(ALIGN);
        AlignedBlock { memory, start }
    }

    fn bytes(&mut self) -> &mut [u8] {
        &mut self.memory[self.start..self.start + BLOCK_BYTES]
    }
}

/// Turns direct I/O on or off for `file`; false where the file system or
/// platform refuses it.
fn set_direct(file: &File, on: bool) -> bool {
    #[cfg(target_os = "linux")]
    {
        use std::os::fd::AsRawFd;
        let fd = file.as_raw_fd();
        // SAFETY: fcntl with F_GETFL/F_SETFL only reads and sets the status
        // flags of a descriptor that `file` keeps open for this call.
        unsafe {
            let flags = libc::fcntl(fd, libc::F_GETFL);
            if flags < 0 {
                return false;
            }
            let flags = if on {
                flags | libc::O_DIRECT
            } else {
                flags & !libc::O_DIRECT
            };
            libc::fcntl(fd, libc::F_SETFL, flags) == 0
        }
    }
    #[cfg(not(target_os = "linux"))]
    {
        let _ = (file, on);
        false
    }
}

/// The writer thread's side: writes each block at its offset, directly
/// while the file system accepts it, and returns the buffer for reuse.
struct BlockWriter<'f> {
    file: &'f File,
    direct: bool,
}

impl BlockWriter<'_> {
    fn write(&mut self, offset: u64, bytes: &[u8]) -> io::Result<()> {
        use std::os::unix::fs::FileExt;
        if self.direct {
            match self.file.write_all_at(bytes, offset) {
                Ok(()) => return Ok(()),
                // Some file systems take the flag and refuse the write.
                Err(e) if e.raw_os_error() == Some(libc::EINVAL) => {
                    set_direct(self.file, false);
                    self.direct = false;
                }
                Err(e) => return Err(e),
            }
        }
        self.file.write_all_at(bytes, offset)?;
        crate::output::start_writeback(self.file, offset, bytes.len() as u64);
        Ok(())
    }
}

/// Writes the whole text into `file` from offset 0 and returns its length
/// and BLAKE3. Blocks are formatted on the rayon pool (so `--threads`
/// bounds the computing), hashed there in order, and written by one I/O
/// thread that mostly waits for the disk; at most [`BLOCK_BUFFERS`] blocks
/// are held.
pub(crate) fn write_file(file: &File, shape: &TextShape, fetch: Fetch<'_>) -> io::Result<Written> {
    write_file_with(file, shape, fetch, true, Order::Falling)
}

/// [`write_file`] from the file's last block to its first, that is from the
/// least significant limb up, asking `fetch` to
/// [`prepare`](LimbFeed::prepare) the limbs of each block first: a number
/// whose limbs are made by a carry pass can be written while it is made,
/// the disk working while the cores make the next limbs. The text's length
/// must be known beforehand ([`TextShape::sized`]).
pub(crate) fn write_file_rising(
    file: &File,
    shape: &TextShape,
    fetch: Fetch<'_>,
) -> io::Result<Written> {
    write_file_with(file, shape, fetch, true, Order::Rising)
}

/// The order a writer takes the file's blocks in.
#[derive(Clone, Copy, PartialEq)]
enum Order {
    /// From the first byte on, the text's own order.
    Falling,
    /// From the last block back, each block's limbs prepared first.
    Rising,
}

/// How a writer hashes what it writes: in the file's order, or block by
/// block in any order.
enum Hashing {
    InOrder(Box<blake3::Hasher>),
    Tree(TreeHash),
}

/// The BLAKE3 of a file hashed block by block in any order: each block of
/// [`BLOCK_BYTES`] (a whole subtree of the hash's tree, as its offset is a
/// multiple of its power-of-two length) is hashed on its own, and the
/// chaining values are merged along the tree at the end.
struct TreeHash {
    total: u64,
    cvs: Vec<blake3::hazmat::ChainingValue>,
    /// The hash itself when the file is a single block (its root).
    single: Option<blake3::Hash>,
}

impl TreeHash {
    fn new(total: u64) -> Self {
        let blocks = (total as usize).div_ceil(BLOCK_BYTES);
        TreeHash {
            total,
            cvs: vec![[0; 32]; blocks],
            single: None,
        }
    }

    /// Hashes the block at `offset` (the whole block's bytes).
    fn add(&mut self, offset: u64, bytes: &[u8]) {
        use blake3::hazmat::HasherExt;
        debug_assert!(offset.is_multiple_of(BLOCK_BYTES as u64));
        let mut h = blake3::Hasher::new();
        if self.total <= BLOCK_BYTES as u64 {
            self.single = Some(h.update_rayon(bytes).finalize());
            return;
        }
        h.set_input_offset(offset).update_rayon(bytes);
        self.cvs[offset as usize / BLOCK_BYTES] = h.finalize_non_root();
    }

    /// The chaining value of the subtree of `len` bytes from block `first`.
    fn subtree(&self, first: usize, len: u64) -> blake3::hazmat::ChainingValue {
        use blake3::hazmat::{left_subtree_len, merge_subtrees_non_root, Mode};
        if len <= BLOCK_BYTES as u64 {
            return self.cvs[first];
        }
        let left = left_subtree_len(len);
        let right_first = first + (left / BLOCK_BYTES as u64) as usize;
        merge_subtrees_non_root(
            &self.subtree(first, left),
            &self.subtree(right_first, len - left),
            Mode::Hash,
        )
    }

    fn finalize(self) -> blake3::Hash {
        use blake3::hazmat::{left_subtree_len, merge_subtrees_root, Mode};
        if let Some(h) = self.single {
            return h;
        }
        // Above one block every split falls on a block boundary: the left
        // part is a power of two at least a block long.
        let left = left_subtree_len(self.total);
        let right_first = (left / BLOCK_BYTES as u64) as usize;
        merge_subtrees_root(
            &self.subtree(0, left),
            &self.subtree(right_first, self.total - left),
            Mode::Hash,
        )
    }
}

/// [`write_file`] or [`write_file_rising`], trying direct I/O only when
/// `try_direct` is set (the tests take both paths on any file system).
fn write_file_with(
    file: &File,
    shape: &TextShape,
    fetch: Fetch<'_>,
    try_direct: bool,
    order: Order,
) -> io::Result<Written> {
    let total = shape.total();
    let direct = try_direct && set_direct(file, true);
    let mut hashing = match order {
        Order::Falling => Hashing::InOrder(Box::default()),
        Order::Rising => Hashing::Tree(TreeHash::new(total)),
    };
    let (to_writer, queued) = mpsc::sync_channel::<(u64, AlignedBlock, usize)>(1);
    let (to_free, free) = mpsc::channel::<AlignedBlock>();
    let count = (total as usize).div_ceil(BLOCK_BYTES);
    for _ in 0..count.min(BLOCK_BUFFERS) {
        to_free.send(AlignedBlock::new()).expect("receiver alive");
    }
    let mut writer = BlockWriter { file, direct };
    let (formatted, written) = std::thread::scope(|s| {
        let io_thread = s.spawn(move || -> io::Result<()> {
            for (offset, mut block, padded) in queued {
                writer.write(offset, &block.bytes()[..padded])?;
                // The formatting side may have stopped on an error.
                let _ = to_free.send(block);
            }
            Ok(())
        });
        let formatted = (|| -> io::Result<()> {
            for i in 0..count {
                let i = match order {
                    Order::Falling => i,
                    Order::Rising => count - 1 - i,
                };
                let offset = (i * BLOCK_BYTES) as u64;
                if order == Order::Rising {
                    fetch.prepare(shape.limbs_from(offset))?;
                }
                let Ok(mut block) = free.recv() else {
                    return Ok(()); // the writer stopped; its error is reported
                };
                let n = (total - offset).min(BLOCK_BYTES as u64) as usize;
                // Direct writes are whole aligned blocks; the file is cut
                // to its length afterwards.
                let padded = n.next_multiple_of(ALIGN);
                let bytes = block.bytes();
                shape.fill_parallel(offset, &mut bytes[..n], fetch)?;
                bytes[n..padded].fill(0);
                match &mut hashing {
                    Hashing::InOrder(h) => {
                        h.update_rayon(&bytes[..n]);
                    }
                    Hashing::Tree(t) => t.add(offset, &bytes[..n]),
                }
                if to_writer.send((offset, block, padded)).is_err() {
                    return Ok(());
                }
            }
            Ok(())
        })();
        drop(to_writer);
        let written = io_thread.join().expect("the writer thread does not panic");
        (formatted, written)
    });
    written?;
    formatted?;
    if direct {
        set_direct(file, false);
    }
    if !total.is_multiple_of(ALIGN as u64) {
        file.set_len(total)?;
    }
    Ok(Written {
        bytes: total,
        blake3: match hashing {
            Hashing::InOrder(h) => h.finalize(),
            Hashing::Tree(t) => t.finalize(),
        },
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn naive(negative: bool, limbs: &[u64], width: usize) -> Vec<u8> {
        let mut s = String::new();
        if limbs.is_empty() {
            return b"0\n".to_vec();
        }
        if negative {
            s.push('-');
        }
        let top = limbs[limbs.len() - 1];
        if width == 16 {
            s += &format!("{top:x}");
            for x in limbs[..limbs.len() - 1].iter().rev() {
                s += &format!("{x:016x}");
            }
        } else {
            s += &format!("{top}");
            for x in limbs[..limbs.len() - 1].iter().rev() {
                s += &format!("{x:019}");
            }
        }
        s.push('\n');
        s.into_bytes()
    }

    /// A feed that counts how often each limb is reported seen.
    /// It also checks, when `rising`, that every read lies below the end
    /// last prepared and that the ends never fall.
    struct Counted<'a> {
        limbs: &'a [u64],
        seen: Vec<std::sync::atomic::AtomicU32>,
        rising: bool,
        prepared: std::sync::atomic::AtomicUsize,
    }

    impl<'a> Counted<'a> {
        fn with_order(limbs: &'a [u64], rising: bool) -> Self {
            let seen = limbs.iter().map(|_| Default::default()).collect();
            Counted {
                limbs,
                seen,
                rising,
                prepared: Default::default(),
            }
        }

        fn assert_each_seen_once(&self) {
            for (i, c) in self.seen.iter().enumerate() {
                assert_eq!(c.load(std::sync::atomic::Ordering::Relaxed), 1, "limb {i}");
            }
        }
    }

    impl LimbFeed for Counted<'_> {
        fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()> {
            if self.rising {
                let end = self.prepared.load(std::sync::atomic::Ordering::Relaxed);
                assert!(
                    first + out.len() <= end,
                    "read {first}+{} past {end}",
                    out.len()
                );
            }
            out.copy_from_slice(&self.limbs[first..first + out.len()]);
            Ok(())
        }

        fn prepare(&self, end: usize) -> io::Result<()> {
            assert!(end <= self.limbs.len());
            let before = self
                .prepared
                .swap(end, std::sync::atomic::Ordering::Relaxed);
            assert!(before <= end, "prepared {end} after {before}");
            Ok(())
        }

        fn seen(&self, first: usize, limbs: &[u64]) {
            for (i, &x) in limbs.iter().enumerate() {
                assert_eq!(x, self.limbs[first + i]);
                self.seen[first + i].fetch_add(1, std::sync::atomic::Ordering::Relaxed);
            }
        }
    }

    fn limbs_of(len: usize, max: u64, seed: u64) -> Vec<u64> {
        let mut r = crate::rng::Rng::new(seed);
        let mut v: Vec<u64> = (0..len).map(|_| r.below(max)).collect();
        if let Some(top) = v.last_mut() {
            *top = (*top % 1000).max(1);
        }
        v
    }

    /// Any byte range of the text, formatted on its own, equals that range
    /// of the naive text: ranges that start and end inside a limb, in the
    /// head, on the newline.
    #[test]
    fn any_range_matches_the_naive_text() {
        for (kind, width, max) in [
            (TextKind::Hex, 16, u64::MAX),
            (TextKind::Decimal, 19, crate::radix::DEC_BASE),
        ] {
            for len in [0usize, 1, 2, 3, 40] {
                for negative in [false, true] {
                    let limbs = limbs_of(len, max, len as u64 + 7);
                    let fetch = SliceFeed {
                        limbs: &limbs,
                        seen: &|_, _| {},
                    };
                    let negative = negative && len > 0;
                    let shape = TextShape::new(kind, negative, len, &fetch).unwrap();
                    let text = naive(negative, &limbs, width);
                    assert_eq!(shape.total(), text.len() as u64);
                    let mut limb_buf = Vec::new();
                    for s in 0..text.len() {
                        for e in s + 1..=text.len() {
                            let mut dst = vec![0u8; e - s];
                            shape
                                .fill(s as u64, &mut dst, &fetch, &mut limb_buf)
                                .unwrap();
                            assert_eq!(dst, &text[s..e], "width {width} len {len} {s}..{e}");
                        }
                    }
                }
            }
        }
    }

    /// The file writer, direct or not, writes the naive text and hashes
    /// it: lengths around the block and alignment edges.
    #[test]
    fn file_matches_the_naive_text_and_its_hash() {
        let dir = tempfile::tempdir().unwrap();
        let lens = [
            0,
            1,
            255,
            256,
            257,
            BLOCK_BYTES / 16 - 1,
            BLOCK_BYTES / 16 + 1,
            2 * BLOCK_BYTES / 16 - 1,
            2 * BLOCK_BYTES / 16,
            3 * BLOCK_BYTES / 16 + 300,
            5 * BLOCK_BYTES / 16,
        ];
        for len in lens {
            let limbs = limbs_of(len, u64::MAX, len as u64);
            let text = naive(len > 0, &limbs, 16);
            let orders = [(true, Order::Falling), (false, Order::Falling)]
                .into_iter()
                .chain([(true, Order::Rising), (false, Order::Rising)]);
            for (direct, order) in orders {
                let rising = order == Order::Rising;
                let fetch = Counted::with_order(&limbs, rising);
                let shape = if rising {
                    // the length known beforehand, as a carry pass knows it
                    let digits = limbs
                        .last()
                        .map_or(1, |&t| digits_of_limb(TextKind::Hex, t).unwrap());
                    TextShape::sized(TextKind::Hex, true, len, digits)
                } else {
                    TextShape::new(TextKind::Hex, true, len, &fetch).unwrap()
                };
                let path = dir.path().join("t.txt");
                let file = File::create(&path).unwrap();
                let w = write_file_with(&file, &shape, &fetch, direct, order).unwrap();
                drop(file);
                let got = std::fs::read(&path).unwrap();
                assert!(
                    got == text,
                    "len {len} direct {direct} rising {rising}: {} bytes against {}",
                    got.len(),
                    text.len()
                );
                assert_eq!(w.bytes, text.len() as u64);
                assert_eq!(w.blake3, blake3::hash(&text));
                fetch.assert_each_seen_once();
            }
            let fetch = SliceFeed {
                limbs: &limbs,
                seen: &|_, _| {},
            };
            let shape = TextShape::new(TextKind::Hex, true, len, &fetch).unwrap();
            let mut stream = Vec::new();
            write_stream(&mut stream, &shape, &fetch).unwrap();
            assert!(stream == text, "stream, len {len}");
        }
    }

    /// A bad limb deep in the text stops the writer with its index, and a
    /// failing fetch with its error; no thread is left behind.
    #[test]
    fn errors_stop_the_pipeline() {
        let dir = tempfile::tempdir().unwrap();
        let len = 4 * BLOCK_BYTES / 19;
        let mut limbs = limbs_of(len, crate::radix::DEC_BASE, 3);
        limbs[1000] = crate::radix::DEC_BASE;
        let fetch = SliceFeed {
            limbs: &limbs,
            seen: &|_, _| {},
        };
        let shape = TextShape::new(TextKind::Decimal, false, len, &fetch).unwrap();
        let file = File::create(dir.path().join("bad.txt")).unwrap();
        let err = write_file(&file, &shape, &fetch).unwrap_err();
        assert!(err.to_string().contains("limb 1000 "), "{err}");

        struct Failing<'a>(usize, &'a [u64]);
        impl LimbFeed for Failing<'_> {
            fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()> {
                if first < self.0 {
                    Err(io::Error::other("read failed"))
                } else {
                    out.copy_from_slice(&self.1[first..first + out.len()]);
                    Ok(())
                }
            }
        }
        let err = write_file(&file, &shape, &Failing(len / 2, &limbs)).unwrap_err();
        assert_eq!(err.to_string(), "read failed");
        let err = write_file_rising(&file, &shape, &Failing(len / 2, &limbs)).unwrap_err();
        assert_eq!(err.to_string(), "read failed");
        // A top limb other than the one the text was laid out for.
        let short = TextShape::sized(TextKind::Decimal, false, len, 1);
        let mut fixed = limbs.clone();
        fixed[1000] = 0;
        fixed[len - 1] = 123;
        let err = write_file_rising(&file, &short, &Failing(0, &fixed)).unwrap_err();
        assert!(
            err.to_string().contains("(123) does not have the 1 digits"),
            "{err}"
        );
    }

    /// Blocks hashed out of order merge to the file's BLAKE3: one block or
    /// less, whole blocks, a short last block, powers of two and not.
    #[test]
    fn tree_hash_matches_the_whole_hash() {
        let b = BLOCK_BYTES;
        for total in [
            1,
            1024,
            b - 1,
            b,
            b + 1,
            2 * b,
            3 * b - 5,
            4 * b,
            4 * b + 1,
            7 * b + 999,
        ] {
            let data: Vec<u8> = (0..total).map(|i| (i * 7 + i / 1000) as u8).collect();
            let mut tree = TreeHash::new(total as u64);
            for (i, block) in data.chunks(b).enumerate().rev() {
                tree.add((i * b) as u64, block);
            }
            assert_eq!(tree.finalize(), blake3::hash(&data), "total {total}");
        }
    }
}
