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
    /// Sign and the top limb's digits without leading zeros; `0` for zero.
    head: Vec<u8>,
    /// Limbs below the top one.
    lower: usize,
    kind: TextKind,
}

/// Limb `index` does not fit the radix the text is written in.
pub(crate) fn bad_limb(index: usize, value: u64) -> io::Error {
    io::Error::new(
        io::ErrorKind::InvalidInput,
        format!("limb {index} is {value}, which is not below 10^19: not a decimal limb"),
    )
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
        let width = kind.width();
        if len == 0 {
            return Ok(TextShape {
                head: b"0".to_vec(),
                lower: 0,
                kind,
            });
        }
        let mut top = [0u64];
        fetch.read(len - 1, &mut top)?;
        fetch.seen(len - 1, &top);
        let mut digits = vec![0u8; width];
        if !put_limb(kind, &mut digits, top[0]) {
            return Err(bad_limb(len - 1, top[0]));
        }
        let skip = digits.iter().position(|&b| b != b'0').unwrap_or(width - 1);
        let mut head = Vec::with_capacity(width + 1);
        if negative {
            head.push(b'-');
        }
        head.extend_from_slice(&digits[skip..]);
        Ok(TextShape {
            head,
            lower: len - 1,
            kind,
        })
    }

    /// Bytes of the whole text, newline included.
    pub(crate) fn total(&self) -> u64 {
        (self.head.len() + self.lower * self.kind.width() + 1) as u64
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
        let head = self.head.len() as u64;
        if start < head {
            let e = end.min(head);
            dst[..(e - start) as usize].copy_from_slice(&self.head[start as usize..e as usize]);
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
    write_file_with(file, shape, fetch, true)
}

/// [`write_file`], trying direct I/O only when `try_direct` is set (the
/// tests take both paths on any file system).
fn write_file_with(
    file: &File,
    shape: &TextShape,
    fetch: Fetch<'_>,
    try_direct: bool,
) -> io::Result<Written> {
    let total = shape.total();
    let direct = try_direct && set_direct(file, true);
    let mut hasher = blake3::Hasher::new();
    let (to_writer, queued) = mpsc::sync_channel::<(u64, AlignedBlock, usize)>(1);
    let (to_free, free) = mpsc::channel::<AlignedBlock>();
    let blocks = (total as usize).div_ceil(BLOCK_BYTES).min(BLOCK_BUFFERS);
    for _ in 0..blocks {
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
            let mut offset = 0u64;
            while offset < total {
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
                hasher.update_rayon(&bytes[..n]);
                if to_writer.send((offset, block, padded)).is_err() {
                    return Ok(());
                }
                offset += n as u64;
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
        blake3: hasher.finalize(),
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
    struct Counted<'a> {
        limbs: &'a [u64],
        seen: Vec<std::sync::atomic::AtomicU32>,
    }

    impl<'a> Counted<'a> {
        fn new(limbs: &'a [u64]) -> Self {
            let seen = limbs.iter().map(|_| Default::default()).collect();
            Counted { limbs, seen }
        }

        fn assert_each_seen_once(&self) {
            for (i, c) in self.seen.iter().enumerate() {
                assert_eq!(c.load(std::sync::atomic::Ordering::Relaxed), 1, "limb {i}");
            }
        }
    }

    impl LimbFeed for Counted<'_> {
        fn read(&self, first: usize, out: &mut [u64]) -> io::Result<()> {
            out.copy_from_slice(&self.limbs[first..first + out.len()]);
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
            3 * BLOCK_BYTES / 16 + 300,
            5 * BLOCK_BYTES / 16,
        ];
        for len in lens {
            let limbs = limbs_of(len, u64::MAX, len as u64);
            let text = naive(len > 0, &limbs, 16);
            for direct in [true, false] {
                let fetch = Counted::new(&limbs);
                let shape = TextShape::new(TextKind::Hex, true, len, &fetch).unwrap();
                let path = dir.path().join("t.txt");
                let file = File::create(&path).unwrap();
                let w = write_file_with(&file, &shape, &fetch, direct).unwrap();
                drop(file);
                let got = std::fs::read(&path).unwrap();
                assert!(
                    got == text,
                    "len {len} direct {direct}: {} bytes against {}",
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

        struct Failing(usize);
        impl LimbFeed for Failing {
            fn read(&self, first: usize, _: &mut [u64]) -> io::Result<()> {
                if first < self.0 {
                    Err(io::Error::other("read failed"))
                } else {
                    Ok(())
                }
            }
        }
        let err = write_file(&file, &shape, &Failing(len / 2)).unwrap_err();
        assert_eq!(err.to_string(), "read failed");
    }
}
