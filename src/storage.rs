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
pub trait Store: Sync {
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
}

/// A store in RAM.
///
/// Words are atomics with relaxed ordering: concurrent passes write disjoint
/// ranges, and rayon's joins order the passes, so no stronger ordering is
/// needed, and plain loads and stores are what x86 executes for them. The
/// copies cost about a cycle a word, small beside the transforms.
///
/// The memory is an anonymous mapping advised for transparent huge pages:
/// the arrays are hundreds of megabytes, and 4 KiB pages cost a fault each
/// and many TLB misses in the strided column passes.
pub struct RamStore {
    map: memmap2::MmapMut,
    len: usize,
}

impl RamStore {
    /// A zero-filled store of `len` words.
    pub fn zeroed(len: usize) -> Self {
        let bytes = (len * 8).max(8);
        let map = memmap2::MmapMut::map_anon(bytes).expect("anonymous mapping for working memory");
        #[cfg(target_os = "linux")]
        {
            // Advice only: without huge pages the store still works.
            let _ = map.advise(memmap2::Advice::HugePage);
        }
        RamStore { map, len }
    }

    fn words(&self) -> &[AtomicU64] {
        // SAFETY: the mapping is page-aligned, at least `len * 8` bytes long,
        // zero-initialised, and lives as long as `self`; AtomicU64 has the
        // size and alignment of u64 and any bit pattern is valid, and its
        // interior mutability makes shared writes through `&self` sound.
        unsafe { std::slice::from_raw_parts(self.map.as_ptr() as *const AtomicU64, self.len) }
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
        self.len
    }

    fn read(&self, start: usize, out: &mut [u64]) -> Result<()> {
        let src = &self.words()[start..start + out.len()];
        for (o, w) in out.iter_mut().zip(src) {
            *o = w.load(Ordering::Relaxed);
        }
        Ok(())
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        let dst = &self.words()[start..start + data.len()];
        for (w, d) in dst.iter().zip(data) {
            w.store(*d, Ordering::Relaxed);
        }
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
