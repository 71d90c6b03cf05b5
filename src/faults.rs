//! A fault-injecting storage backend for tests: fails the N-th read, write
//! or sync of the scratch stores, once (a transient fault) or from then on
//! (a persistent one). The engine never retries a failed operation, so
//! either way the run stops with an error, and a rerun must resume from its
//! last verified checkpoint and still give the exact product.

use crate::ooc::Space;
use crate::storage::Store;
use crate::{Error, Result};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;

/// Which operation fails, and how.
#[derive(Debug)]
pub struct FaultPlan {
    /// The 1-based number of the first failing operation (0: none fails,
    /// only count them).
    pub fail_at: u64,
    /// Every operation after the first failing one fails too.
    pub persistent: bool,
    count: AtomicU64,
}

impl FaultPlan {
    /// A plan that fails operation `fail_at`, once or from then on.
    pub fn new(fail_at: u64, persistent: bool) -> Arc<Self> {
        Arc::new(FaultPlan {
            fail_at,
            persistent,
            count: AtomicU64::new(0),
        })
    }

    /// Operations seen so far.
    pub fn operations(&self) -> u64 {
        self.count.load(Ordering::SeqCst)
    }

    fn tick(&self, what: &str) -> Result<()> {
        let n = self.count.fetch_add(1, Ordering::SeqCst) + 1;
        let fails =
            self.fail_at != 0 && (n == self.fail_at || (self.persistent && n > self.fail_at));
        if fails {
            Err(Error::io(
                format!("<injected fault in {what} #{n}>"),
                std::io::Error::other("injected I/O fault"),
            ))
        } else {
            Ok(())
        }
    }
}

/// A store whose operations go through a [`FaultPlan`].
pub struct FaultyStore {
    inner: Box<dyn Store>,
    plan: Arc<FaultPlan>,
}

impl Store for FaultyStore {
    fn len(&self) -> usize {
        self.inner.len()
    }

    fn read(&self, start: usize, out: &mut [u64]) -> Result<()> {
        self.plan.tick("read")?;
        self.inner.read(start, out)
    }

    fn write(&self, start: usize, data: &[u64]) -> Result<()> {
        self.plan.tick("write")?;
        self.inner.write(start, data)
    }

    fn prefetch(&self, start: usize, len: usize) {
        self.inner.prefetch(start, len)
    }

    fn sync(&self) -> Result<()> {
        self.plan.tick("sync")?;
        self.inner.sync()
    }

    fn discard(&self) -> Result<()> {
        self.plan.tick("discard")?;
        self.inner.discard()
    }
}

/// A [`Space`] whose stores are [`FaultyStore`]s over another space's.
pub struct FaultySpace<'a> {
    /// The space holding the real stores.
    pub inner: &'a dyn Space,
    /// The shared fault plan.
    pub plan: Arc<FaultPlan>,
}

impl Space for FaultySpace<'_> {
    fn store(
        &self,
        name: &str,
        len: usize,
        width: crate::packing::WordWidth,
    ) -> Result<(Box<dyn Store>, bool)> {
        let (inner, reused) = self.inner.store(name, len, width)?;
        Ok((
            Box::new(FaultyStore {
                inner,
                plan: self.plan.clone(),
            }),
            reused,
        ))
    }
}
