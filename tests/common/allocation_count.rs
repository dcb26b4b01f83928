//! A global allocator that counts allocations, for the test crates that
//! assert how many a piece of work makes. Include it with `#[path]` in a
//! test crate of its own: one global allocator per process, and it counts
//! for every thread of that process.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

struct Counting;
static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

// A global allocator needs `unsafe impl`; this one only forwards to the
// system allocator and counts the allocations.
#[allow(unsafe_code)]
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Allocations made so far by the whole process.
pub fn allocations() -> usize {
    ALLOCATIONS.load(Ordering::SeqCst)
}
