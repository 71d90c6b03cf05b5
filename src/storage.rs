//! Where the transform's working arrays live.
//!
//! The passes move data only through [`Store`]: they read a block of words,
//! compute on it in a private buffer, and write it back. The kernels never
//! learn which backend holds the data, so RAM, memory-mapped scratch files
//! and fault-injecting test backends are interchangeable.

use crate::Result;
use std::sync::atomic::{AtomicU64, Ordering};

/// A fixed-length array of 64-bit words that many threads may read and write
/// concurrently, each thread touching its own ranges.
pub trait Store: Send + Sync {
    /// Length in words.
    fn len(&self) -> usize;

    /// True when the store holds no words.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Copies words `start .. start + out.len()` into `out`.
    fn read(&self, start: usize, out: &mut [u64]) -> Result<()>;

    /// Copies `data` into words `start .. start + data.len()`.
    fn write(&self, start: usize, data: &[u64]) -> Result<()>;

    /// A hint that words `start .. start + len` will be read soon; stores
    /// on disk start reading them in the background. Never required.
    fn prefetch(&self, _start: usize, _len: usize) {}

    /// Makes the words written so far durable (a no-op in RAM). A failure
    /// is final: what was written since the last successful sync may be
    /// lost, and the run must stop rather than go on as if it were kept.
    fn sync(&self) -> Result<()> {
        Ok(())
    }

    /// Gives up the contents (a scratch file is truncated, its pages
    /// dropped unwritten); nothing may be read from the store afterwards.
    fn discard(&self) -> Result<()> {
        Ok(())
    }
}

/// Stores being given back on a thread of their own. Truncating a large
/// scratch file waits on the disk (a file system that discards freed
/// blocks does so before the call returns), so it runs beside whatever
/// comes next, such as writing the product, instead of before it.
#[derive(Default)]
pub struct Discarding(Option<std::thread::JoinHandle<Result<()>>>);

impl Discarding {
    /// Discards `stores` one after another on a new thread, then drops
    /// them there. Where no thread can be started, it does so now.
    pub fn start(stores: Vec<Box<dyn Store>>) -> Result<Discarding> {
        let shared = std::sync::Arc::new(std::sync::Mutex::new(Some(stores)));
        let theirs = shared.clone();
        let spawned = std::thread::Builder::new()
            .name("vastmul-discard".into())
            .spawn(move || match theirs.lock().unwrap().take() {
                Some(stores) => discard_all(stores),
                None => Ok(()),
            });
        match spawned {
            Ok(handle) => Ok(Discarding(Some(handle))),
            Err(_) => match shared.lock().unwrap().take() {
                Some(stores) => discard_all(stores).map(|()| Discarding(None)),
                None => Ok(Discarding(None)),
            },
        }
    }

    /// Waits until every store is given back; the first failure, if any.
    pub fn wait(&mut self) -> Result<()> {
        match self.0.take() {
            Some(handle) => handle
                .join()
                .unwrap_or_else(|panic| std::panic::resume_unwind(panic)),
            None => Ok(()),
        }
    }
}

impl Drop for Discarding {
    /// A run that stops early still waits for its scratch to be given back
    /// (the files belong to its state), but its own error is what it
    /// reports.
    fn drop(&mut self) {
        if let Some(handle) = self.0.take() {
            let _ = handle.join();
        }
    }
}

fn discard_all(stores: Vec<Box<dyn Store>>) -> Result<()> {
    for s in &stores {
        s.discard()?;
    }
    Ok(())
}

impl<S: Store + ?Sized> Store for Box<S> {
    fn len(&self) -> usize {
        (**self).len()
    }

    fn read(&self, start: usize, out: &mut [u64]) -> Result<()> {
        (**self).read(start, out)
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        (**self).write(start, data)
    }

    fn prefetch(&self, start: usize, len: usize) {
        (**self).prefetch(start, len)
    }

    fn sync(&self) -> Result<()> {
        (**self).sync()
    }

    fn discard(&self) -> Result<()> {
        (**self).discard()
    }
}

/// A source of limbs: `fill_limbs(first, out)` writes limbs
/// `first..first + out.len()` into `out`, zeros past the operand's end.
pub trait LimbSource: Sync {
    /// Fills `out` with limbs starting at `first`.
    fn fill_limbs(&self, first: usize, out: &mut [u64]);

    /// A hint that limbs `first..first + n` will be read soon; sources on
    /// disk start reading them in the background. Never required.
    fn prefetch_limbs(&self, _first: usize, _n: usize) {}

    /// Limb `i`, looked at rather than consumed: the column pass reads each
    /// segment's left neighbour for its balanced digit's carry. Sources
    /// that account for what they read (residue taps, meters) pass it to
    /// their inner source uncounted.
    fn peek_limb(&self, i: usize) -> u64 {
        let mut x = [0u64];
        self.fill_limbs(i, &mut x);
        x[0]
    }

    /// Limbs `first..first + out.len()`, looked at rather than consumed
    /// (as [`LimbSource::peek_limb`]): the wrap-around correction reads an
    /// operand's top limbs a second time. Sources that count nothing read
    /// them as [`LimbSource::fill_limbs`] does.
    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        for (i, o) in out.iter_mut().enumerate() {
            *o = self.peek_limb(first + i);
        }
    }
}

impl LimbSource for [u64] {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        let have = self.len().saturating_sub(first).min(out.len());
        out[..have].copy_from_slice(&self[first..first + have]);
        out[have..].fill(0);
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.fill_limbs(first, out)
    }
}

impl LimbSource for Vec<u64> {
    fn fill_limbs(&self, first: usize, out: &mut [u64]) {
        self.as_slice().fill_limbs(first, out)
    }

    fn peek_limbs(&self, first: usize, out: &mut [u64]) {
        self.fill_limbs(first, out)
    }
}

/// The bytes of a slice of words, in native order (for hashing).
pub fn words_as_bytes(words: &[u64]) -> &[u8] {
    // SAFETY: u8 has no alignment requirement and every u64 is 8 plain
    // bytes; the view borrows `words` for its whole life.
    unsafe { std::slice::from_raw_parts(words.as_ptr() as *const u8, words.len() * 8) }
}

/// An owned, zero-initialised array of words in an anonymous memory
/// mapping advised for transparent huge pages.
///
/// The working arrays are hundreds of megabytes, and with 4 KiB pages every
/// page costs a fault on first touch and a TLB entry in the strided column
/// passes. Fresh memory is expensive to touch (in a virtual machine above
/// all), so the engine reuses these buffers rather than allocating anew.
pub struct WordBuf {
    mem: Memory,
    len: usize,
}

/// Small buffers come from the heap: a mapping costs system calls that
/// dominate small products.
enum Memory {
    Heap(Vec<u64>),
    Mapped(memmap2::MmapMut),
}

/// Buffers from this many words up are mapped rather than heap-allocated.
const MAP_THRESHOLD_WORDS: usize = 1 << 17;

impl WordBuf {
    /// A zero-filled buffer of `len` words.
    pub fn zeroed(len: usize) -> Self {
        if len < MAP_THRESHOLD_WORDS {
            return WordBuf {
                mem: Memory::Heap(vec![0; len]),
                len,
            };
        }
        let map =
            memmap2::MmapMut::map_anon(len * 8).expect("anonymous mapping for working memory");
        #[cfg(target_os = "linux")]
        {
            // Advice only: without huge pages the buffer still works.
            let _ = map.advise(memmap2::Advice::HugePage);
        }
        WordBuf {
            mem: Memory::Mapped(map),
            len,
        }
    }

    /// Shortens the visible length to `len` words (never grows it).
    pub fn truncate(&mut self, len: usize) {
        self.len = self.len.min(len);
    }

    fn as_ptr(&self) -> *const u64 {
        match &self.mem {
            Memory::Heap(v) => v.as_ptr(),
            Memory::Mapped(m) => m.as_ptr() as *const u64,
        }
    }

    fn as_mut_ptr(&mut self) -> *mut u64 {
        match &mut self.mem {
            Memory::Heap(v) => v.as_mut_ptr(),
            Memory::Mapped(m) => m.as_mut_ptr() as *mut u64,
        }
    }
}

impl std::ops::Deref for WordBuf {
    type Target = [u64];
    fn deref(&self) -> &[u64] {
        // SAFETY: both memories are aligned for u64 (a Vec<u64>, or a
        // page-aligned mapping), at least `len` words long, initialised
        // (zero-filled), and borrowed for no longer than `self`.
        unsafe { std::slice::from_raw_parts(self.as_ptr(), self.len) }
    }
}

impl std::ops::DerefMut for WordBuf {
    fn deref_mut(&mut self) -> &mut [u64] {
        let len = self.len;
        // SAFETY: as in `deref`, and `&mut self` makes the borrow unique.
        unsafe { std::slice::from_raw_parts_mut(self.as_mut_ptr(), len) }
    }
}

/// A store in RAM.
///
/// The words are held as atomics, so that tasks may write their disjoint
/// ranges through a shared store; but the copies in and out are plain
/// vector copies. Concurrent passes write disjoint ranges and rayon's joins
/// order the passes, so no copy races another, and word-by-word relaxed
/// atomics (which never merge into vector moves) cost the column passes
/// 13-18% of their time on the decimal 4·10^7-digit pair.
pub struct RamStore {
    buf: WordBuf,
}

impl RamStore {
    /// A zero-filled store of `len` words.
    pub fn zeroed(len: usize) -> Self {
        RamStore {
            buf: WordBuf::zeroed(len),
        }
    }

    fn words(&self) -> &[AtomicU64] {
        // SAFETY: the buffer is aligned, initialised and `len` words long;
        // AtomicU64 has the size, alignment and bit validity of u64, and its
        // interior mutability makes shared writes through `&self` sound. No
        // plain `&[u64]` to it exists while `self` is borrowed, since
        // `into_words` consumes the store.
        unsafe { std::slice::from_raw_parts(self.buf.as_ptr() as *const AtomicU64, self.buf.len) }
    }

    /// The words as a plain buffer, for reuse once the passes are done.
    pub fn into_words(self) -> WordBuf {
        self.buf
    }

    /// Copies the whole store out (for tests and small products).
    pub fn to_vec(&self) -> Vec<u64> {
        self.words()
            .iter()
            .map(|w| w.load(Ordering::Relaxed))
            .collect()
    }
}

impl Store for RamStore {
    fn len(&self) -> usize {
        self.buf.len
    }

    fn read(&self, start: usize, out: &mut [u64]) -> Result<()> {
        let src = &self.words()[start..start + out.len()];
        // SAFETY: `src` and `out` are both `out.len()` words, and distinct
        // memory (`out` is a unique borrow). The passes never write a range
        // while another task reads or writes it (rayon's joins order the
        // passes, and the blocks within one are disjoint), so these plain
        // loads race with nothing; they compile to a vector copy, which
        // word-by-word atomic loads do not.
        unsafe {
            std::ptr::copy_nonoverlapping(src.as_ptr() as *const u64, out.as_mut_ptr(), out.len())
        }
        Ok(())
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        let dst = &self.words()[start..start + data.len()];
        if dst.is_empty() {
            return Ok(());
        }
        // SAFETY: as in `read`: `dst` is `data.len()` words that no other
        // task touches during this pass, and `AtomicU64::as_ptr` gives a
        // pointer that may be written through (the words are interior
        // mutable), disjoint from the shared borrow `data`.
        unsafe { std::ptr::copy_nonoverlapping(data.as_ptr(), dst[0].as_ptr(), data.len()) }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ram_store_round_trips_ranges() {
        let s = RamStore::zeroed(10);
        s.write(3, &[7, 8, 9]).unwrap();
        let mut out = [1u64; 5];
        s.read(2, &mut out).unwrap();
        assert_eq!(out, [0, 7, 8, 9, 0]);
        assert_eq!(s.len(), 10);
    }
}
