//! Output arrays whose memory is used again.
//!
//! A batch of a million cases returns about 70 MB of outputs. glibc hands
//! blocks that large straight from the operating system (`mmap`) and gives
//! them straight back when the result is freed, so every call pays to have
//! fresh pages mapped and zeroed; on virtual machines that report freed
//! memory to the host this costs more than the solve writing into it (about
//! 3 ms per MiB measured here, against ~0.03 ms per MiB for memory the process
//! already holds). Smaller outputs do not have this cost: the allocator's
//! heap keeps them.
//!
//! So large output blocks freed by Python (all views of an array gone) go
//! back to a small process-wide cache instead, and the next solve of a
//! similar size takes them: a loop of large solves (a Monte Carlo study, an
//! optimiser's sweep) then maps its output memory once. The cache holds at
//! most [`RETAIN`] bytes, drops blocks unused for [`KEEP_FOR`] (checked at
//! every solve: a process that stops solving keeps them until it exits or
//! calls `eqbatch.release_memory()`, which empties the cache).
//!
//! Fresh blocks are zeroed (by the operating system); a reused block holds
//! the values of the result it last served. The core writes every value of
//! every case it is given (`solve_batch`'s contract, tested with poisoned
//! outputs in the core), so no stale value can reach the caller.

use std::sync::Mutex;
use std::time::{Duration, Instant};

use numpy::ndarray::{ArrayView, Dimension, IntoDimension};
use numpy::{Element, PyArray};
use pyo3::exceptions::PyMemoryError;
use pyo3::prelude::*;

/// Outputs smaller than this come from numpy as usual (the heap reuses them).
pub const POOLED_FROM: usize = 4 << 20;
/// The most memory the cache holds.
pub const RETAIN: usize = 1 << 30;
/// A cached block unused for this long is returned to the operating system.
pub const KEEP_FOR: Duration = Duration::from_secs(30);

struct Cache {
    /// Free blocks, oldest first, with the time each was freed.
    free: Vec<(Vec<u64>, Instant)>,
}

static CACHE: Mutex<Cache> = Mutex::new(Cache { free: Vec::new() });

fn bytes_of(block: &[u64]) -> usize {
    std::mem::size_of_val(block)
}

impl Cache {
    /// Bytes held (a handful of blocks at most).
    fn held(&self) -> usize {
        self.free.iter().map(|(block, _)| bytes_of(block)).sum()
    }

    /// Blocks to free (outside the lock): those unused for [`KEEP_FOR`], then
    /// the oldest until the cache holds at most [`RETAIN`] bytes.
    fn trim(&mut self, now: Instant) -> Vec<Vec<u64>> {
        let mut held = self.held();
        let mut gone = Vec::new();
        let mut k = 0;
        while k < self.free.len() {
            if now.duration_since(self.free[k].1) > KEEP_FOR || held > RETAIN {
                let (block, _) = self.free.remove(k);
                held -= bytes_of(&block);
                gone.push(block);
            } else {
                k += 1;
            }
        }
        gone
    }

    /// The smallest free block of at least `words` words and at most half
    /// as large again (a much larger block would keep memory resident that
    /// the result does not use).
    fn take(&mut self, words: usize) -> Option<Vec<u64>> {
        let fits = |len: usize| len >= words && len <= words + words / 2;
        let k = (0..self.free.len())
            .filter(|&k| fits(self.free[k].0.len()))
            .min_by_key(|&k| self.free[k].0.len())?;
        Some(self.free.remove(k).0)
    }
}

fn lock() -> std::sync::MutexGuard<'static, Cache> {
    // A panic while the lock was held cannot leave the list inconsistent
    // (each change is one push or remove), so a poisoned lock is still usable.
    CACHE.lock().unwrap_or_else(|e| e.into_inner())
}

/// A block of at least `words` words: from the cache when one fits, else
/// fresh and zeroed. Blocks keep their full length (the array uses a prefix).
fn block(words: usize) -> PyResult<Vec<u64>> {
    let found = lock().take(words);
    expire();
    found.map_or_else(|| fresh(words), Ok)
}

/// Zeroed memory straight from the allocator (`calloc`: pages the system
/// maps on first touch, not written here); out of memory is a `MemoryError`.
fn fresh(words: usize) -> PyResult<Vec<u64>> {
    let layout = std::alloc::Layout::array::<u64>(words)
        .map_err(|_| PyMemoryError::new_err("output too large"))?;
    // SAFETY: `layout` has a non-zero size (callers ask for at least
    // POOLED_FROM bytes); a non-null result is `words` zeroed u64 values
    // allocated by the global allocator with exactly the layout a
    // `Vec<u64>` of capacity `words` frees with.
    let block = unsafe {
        let ptr = std::alloc::alloc_zeroed(layout).cast::<u64>();
        if ptr.is_null() {
            return Err(PyMemoryError::new_err(format!(
                "cannot allocate {} MiB for the outputs",
                (words * 8) >> 20
            )));
        }
        Vec::from_raw_parts(ptr, words, words)
    };
    // numpy asks for transparent huge pages on its large arrays; do the same
    // (fewer page faults and TLB misses; only advice, so errors are ignored).
    #[cfg(target_os = "linux")]
    {
        const PAGE: usize = 4096;
        let start = block.as_ptr() as usize;
        let aligned = start.next_multiple_of(PAGE);
        let end = (start + bytes_of(&block)) / PAGE * PAGE;
        if end > aligned {
            // SAFETY: the range lies inside the block's allocation, and
            // MADV_HUGEPAGE changes no contents.
            unsafe {
                libc::madvise(
                    aligned as *mut libc::c_void,
                    end - aligned,
                    libc::MADV_HUGEPAGE,
                );
            }
        }
    }
    Ok(block)
}

/// Owns one output block while any numpy view of it lives; returns it to
/// the cache when the last one goes.
#[pyclass(module = "eqbatch._core", frozen)]
pub struct OutputBlock {
    words: Vec<u64>,
}

impl Drop for OutputBlock {
    fn drop(&mut self) {
        let block = std::mem::take(&mut self.words);
        if bytes_of(&block) <= RETAIN {
            lock().free.push((block, Instant::now()));
            expire();
        }
    }
}

/// Element types for which every bit pattern is a valid value, so that a
/// reused block's left-over bytes are never undefined behaviour to read
/// (not `bool`, for one), and whose alignment a `u64` block satisfies.
pub trait AnyBits: Element + Copy {}
impl AnyBits for f64 {}
impl AnyBits for u32 {}
impl AnyBits for u8 {}

/// A C-contiguous array of `shape`, its memory from the cache when large.
/// Its values are zeros (fresh) or left over from an earlier result
/// (reused): the caller overwrites every one.
pub fn output<'py, T, D>(py: Python<'py>, shape: D) -> PyResult<Bound<'py, PyArray<T, D::Dim>>>
where
    T: AnyBits,
    D: IntoDimension,
{
    const { assert!(std::mem::align_of::<T>() <= std::mem::align_of::<u64>()) };
    let dim = shape.into_dimension();
    let len = dim.size();
    let bytes = len
        .checked_mul(std::mem::size_of::<T>())
        .ok_or_else(|| PyMemoryError::new_err("output too large"))?;
    if bytes < POOLED_FROM {
        expire();
        return Ok(PyArray::zeros(py, dim, false));
    }
    let mut words = block(bytes.div_ceil(8))?;
    let data = words.as_mut_ptr().cast::<T>();
    let owner = Bound::new(py, OutputBlock { words })?;
    // SAFETY: `data` points at `len` values of `T` inside the block that
    // `owner` now holds (moving a Vec does not move its buffer); the block is
    // never resized while `owner` lives, and `owner` becomes the array's base
    // object, so it lives as long as the array and any view of it.
    unsafe {
        let view = ArrayView::from_shape_ptr(dim, data as *const T);
        Ok(PyArray::borrow_from_array(&view, owner.into_any()))
    }
}

/// Drop blocks unused for [`KEEP_FOR`] and any beyond [`RETAIN`] (every
/// solve calls this, so a program that goes on with small solves after a
/// large one gives the memory back). Blocks are freed outside the lock.
fn expire() {
    let gone = lock().trim(Instant::now());
    drop(gone);
}

/// Free every cached block; the bytes the cache held (the allocator may keep
/// part of it for the process rather than return it to the system).
#[pyfunction]
pub fn release_buffers() -> usize {
    let gone = std::mem::take(&mut lock().free);
    gone.iter().map(|(block, _)| bytes_of(block)).sum()
}

/// `(blocks, bytes)` in the cache now (for tests and curious users).
#[pyfunction]
pub fn cached_buffers() -> (usize, usize) {
    let cache = lock();
    (cache.free.len(), cache.held())
}
