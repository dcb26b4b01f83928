//! How the work of one thread spreads over the cores (the `threads`
//! feature): which thread may split its products and elementwise maps, and
//! from what size.
//!
//! Handing half of a product to another core pays only if that core is
//! awake: a rayon thread that has gone to sleep takes longer to wake on a
//! virtual machine than half of a training step's product takes (at 128 x
//! 256 x 256, two halves on two cores ran at 90-137 GFLOP/s against 93-150
//! on one). [`on_awake_cores`] runs a piece of work on a rayon thread while
//! another rayon thread stands by, awake, taking any half put up for
//! it; there the same halves ran at 150-226 GFLOP/s. The training loop runs
//! in it, so its products and elementwise maps split from much smaller
//! sizes than elsewhere.

#[cfg(feature = "threads")]
use std::cell::Cell;

/// What the calling thread does with work that could split.
#[cfg(feature = "threads")]
#[derive(Clone, Copy, PartialEq, Eq)]
enum Spread {
    /// Splits only large work (products of 2^24 multiply-adds, maps over
    /// 2^18 elements): the other threads may be asleep.
    Large,
    /// Another thread stands by ([`on_awake_cores`]): splits from much
    /// smaller sizes, in halves.
    Awake,
    /// Standing by for another thread's halves ([`on_awake_cores`]); splits
    /// as [`Spread::Large`] does.
    StandingBy,
    /// One of several threads that already share the cores (sharded
    /// training): keeps its work to itself. Splitting the shards' maps
    /// again only made them queue for the same pool's threads (on 2 cores,
    /// it took 2 shards from 1.5 to 1.2 times as fast as one shard).
    Own,
}

#[cfg(feature = "threads")]
thread_local! {
    static SPREAD: Cell<Spread> = const { Cell::new(Spread::Large) };
    /// How often, lately, the half handed to the standing-by thread came
    /// back much later than this thread's own (see [`beside`]).
    static STRAIN: Cell<u32> = const { Cell::new(0) };
}

/// The strain at which a thread stops handing halves over for the rest of
/// its `on_awake_cores`: eight slow halves more than fast ones.
#[cfg(feature = "threads")]
const GIVE_UP_AT: u32 = 16;

/// Runs `first` here and offers `second` to the standing-by thread (the
/// halves of a product), and keeps count of halves that came back much
/// later than this thread's own (by more than its own took, plus 100
/// microseconds). On a machine whose other core is busy with other
/// programs, the standing-by thread can lose its core for a whole time
/// slice (milliseconds) in the middle of a half. After eight such halves
/// more than prompt ones, the thread keeps its work whole (as
/// [`Spread::Large`]) until its [`on_awake_cores`] ends. A half nobody
/// took in time is run here, by rayon, and costs no wait.
#[cfg(feature = "threads")]
pub(crate) fn beside<RA: Send, RB: Send>(
    first: impl FnOnce() -> RA + Send,
    second: impl FnOnce() -> RB + Send,
) -> (RA, RB) {
    use std::time::Instant;
    let here = rayon::current_thread_index();
    let start = Instant::now();
    let ((a, own_done), (b, taken)) = rayon::join(
        || {
            let a = first();
            (a, Instant::now())
        },
        || {
            let b = second();
            (b, rayon::current_thread_index() != here)
        },
    );
    if taken {
        let late = is_late(own_done.duration_since(start), own_done.elapsed());
        STRAIN.with(|strain| {
            let now = strain_after(strain.get(), late);
            strain.set(now);
            if now >= GIVE_UP_AT {
                SPREAD.with(|s| s.set(Spread::Large));
            }
        });
    }
    (a, b)
}

/// Whether the other half, taken by the standing-by thread, came back late:
/// `waited` after this thread's own half, which took `own`.
#[cfg(feature = "threads")]
fn is_late(own: std::time::Duration, waited: std::time::Duration) -> bool {
    waited > own + std::time::Duration::from_micros(100)
}

/// The strain after one more half: up by two when it was late, down by one
/// (to no less than 0) when it was not.
#[cfg(feature = "threads")]
fn strain_after(strain: u32, late: bool) -> u32 {
    if late {
        strain.saturating_add(2)
    } else {
        strain.saturating_sub(1)
    }
}

#[cfg(feature = "threads")]
fn spread() -> Spread {
    SPREAD.with(Cell::get)
}

/// Marks the calling thread as one of several that already share the
/// cores: its products and elementwise maps stay on it.
pub(crate) fn keep_work_on_this_thread() {
    #[cfg(feature = "threads")]
    SPREAD.with(|s| s.set(Spread::Own));
}

/// Runs `work` with this thread's products and elementwise maps kept on
/// it, as on a shard's thread, then lets them split again as before:
/// the training thread running a shard of its own beside the others.
pub(crate) fn with_work_on_this_thread<R>(work: impl FnOnce() -> R) -> R {
    #[cfg(feature = "threads")]
    {
        struct Restore(Spread);
        impl Drop for Restore {
            fn drop(&mut self) {
                SPREAD.with(|s| s.set(self.0));
            }
        }
        let _restore = Restore(SPREAD.with(|s| s.replace(Spread::Own)));
        work()
    }
    #[cfg(not(feature = "threads"))]
    work()
}

/// Products of at least this many multiply-adds split their rows in two
/// halves when another core stands by: about 10 to 20 microseconds of one
/// core's work, against about a microsecond to hand a half over.
#[cfg(feature = "threads")]
const AWAKE_PRODUCT_FROM: usize = 1 << 20;

/// Products of at least this many multiply-adds split their output rows
/// anywhere else. At 1,024^3 two halves ran 1.7-1.9 times as fast.
#[cfg(feature = "threads")]
const PRODUCT_FROM: usize = 1 << 24;

/// Elementwise maps over at least this many elements split when another
/// core stands by.
#[cfg(feature = "threads")]
const AWAKE_ELEMENTS_FROM: usize = 1 << 14;

/// Elementwise maps over at least this many elements split anywhere else:
/// below it handing work to sleeping threads cost more than it saved (at
/// 2^15 elements, `tanh` over a 128 x 256 batch, an f32 training step ran
/// at 42 GFLOP/s split against 62 not). Since the loops run on the widest
/// vector instructions, an f32 `tanh` split at 2^17 elements ran no faster
/// than whole (0.41 against 0.40 ns per element), at 2^18 at 0.34, at
/// 2^19 at 0.23.
#[cfg(feature = "threads")]
const ELEMENTS_FROM: usize = 1 << 18;

/// How a product of `m` rows and `m * k * n` multiply-adds runs on the
/// calling thread.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
#[cfg_attr(not(feature = "threads"), allow(dead_code))]
pub(crate) enum ProductSplit {
    /// On this thread.
    Whole,
    /// In two halves of rows, each of which may split again.
    Halves,
    /// In two halves of rows, each on one core as a whole.
    HalvesOnce,
}

/// How a product of `m` rows and `multiply_adds` multiply-adds runs.
#[inline]
pub(crate) fn product_split(m: usize, multiply_adds: usize) -> ProductSplit {
    #[cfg(feature = "threads")]
    match spread() {
        Spread::Large | Spread::StandingBy
            if m >= 32 && multiply_adds >= PRODUCT_FROM && another_core() =>
        {
            return ProductSplit::Halves;
        }
        Spread::Awake if m >= 16 && multiply_adds >= AWAKE_PRODUCT_FROM => {
            return ProductSplit::HalvesOnce;
        }
        _ => {}
    }
    let _ = (m, multiply_adds);
    ProductSplit::Whole
}

/// Whether rayon's pool has a thread for a second half. With one thread
/// (`RAYON_NUM_THREADS=1`, or a machine of one core) a half handed to the
/// pool runs on that thread while this one waits for it: the same work,
/// plus two hand-overs between threads.
#[cfg(feature = "threads")]
#[inline]
fn another_core() -> bool {
    rayon::current_num_threads() >= 2
}

/// Whether an elementwise map over `len` elements splits across cores.
#[inline]
pub(crate) fn split_elements(len: usize) -> bool {
    #[cfg(feature = "threads")]
    {
        match spread() {
            Spread::Large | Spread::StandingBy => len >= ELEMENTS_FROM && another_core(),
            Spread::Awake => len >= AWAKE_ELEMENTS_FROM,
            Spread::Own => false,
        }
    }
    #[cfg(not(feature = "threads"))]
    {
        let _ = len;
        false
    }
}

/// Whether another thread stands by for this one's halves (inside
/// [`on_awake_cores`]). Work too light to pay for waking a sleeping thread
/// (a finite check: about a tenth of a nanosecond per element) splits only
/// then.
#[inline]
pub(crate) fn standing_by() -> bool {
    #[cfg(feature = "threads")]
    {
        spread() == Spread::Awake
    }
    #[cfg(not(feature = "threads"))]
    {
        false
    }
}

/// Slices of one length (and tuples of them) that can be cut in two at
/// the same place, for the halves of [`over_halves`].
pub(crate) trait Halves: Sized + Send {
    /// The first `mid` elements, and the rest.
    fn halves(self, mid: usize) -> (Self, Self);
}

impl<M: Send> Halves for &mut [M] {
    fn halves(self, mid: usize) -> (Self, Self) {
        self.split_at_mut(mid)
    }
}

impl<M: Sync> Halves for &[M] {
    fn halves(self, mid: usize) -> (Self, Self) {
        self.split_at(mid)
    }
}

impl<A: Halves, B: Halves> Halves for (A, B) {
    fn halves(self, mid: usize) -> (Self, Self) {
        let ((a1, a2), (b1, b2)) = (self.0.halves(mid), self.1.halves(mid));
        ((a1, b1), (a2, b2))
    }
}

impl<A: Halves, B: Halves, C: Halves> Halves for (A, B, C) {
    fn halves(self, mid: usize) -> (Self, Self) {
        let ((a1, a2), (b1, b2), (c1, c2)) =
            (self.0.halves(mid), self.1.halves(mid), self.2.halves(mid));
        ((a1, b1, c1), (a2, b2, c2))
    }
}

/// Runs `pass` over `parts` (slices of `len` elements each), whole or in
/// halves on two cores, as [`split_elements`] says, and joins the halves'
/// answers with `join`; each half gets the same `pass`, so it must treat
/// elements independently.
#[inline]
pub(crate) fn over_halves<K, R, P>(len: usize, parts: K, pass: &P, join: fn(R, R) -> R) -> R
where
    K: Halves,
    R: Send,
    P: Fn(K) -> R + Sync,
{
    if split_elements(len) {
        return in_two(len, parts, pass, join);
    }
    pass(parts)
}

/// [`over_halves`] on two cores; out of line, so that the common path (one
/// core) keeps a small stack frame.
#[inline(never)]
fn in_two<K, R, P>(len: usize, parts: K, pass: &P, join: fn(R, R) -> R) -> R
where
    K: Halves,
    R: Send,
    P: Fn(K) -> R + Sync,
{
    let mid = len / 2;
    let (first, second) = parts.halves(mid);
    #[cfg(feature = "threads")]
    {
        // Beside a standing-by core, halves once; elsewhere (large work,
        // any number of cores) again while they are long enough.
        let (a, b) = if spread() == Spread::Awake {
            rayon::join(|| pass(first), || pass(second))
        } else {
            rayon::join(
                || over_halves(mid, first, pass, join),
                || over_halves(len - mid, second, pass, join),
            )
        };
        join(a, b)
    }
    #[cfg(not(feature = "threads"))]
    {
        join(pass(first), pass(second))
    }
}

/// Runs `work` on a thread of rayon's pool while another of its threads
/// stands by for halves of matrix products and elementwise maps, and
/// returns what `work` returns (a panic in `work` comes back as a panic).
///
/// [`Training::run`](crate::Training::run) runs in it. Call it around a
/// training loop of your own (the reusing passes, an optimiser) to give
/// that loop the same use of two cores: inside, products of 2^20
/// multiply-adds or more (a 128 x 256 batch by a 256 x 256 matrix is 2^23)
/// and elementwise maps and optimiser updates over 16,384 elements or more
/// run in two halves, one per core; elsewhere only products of 2^24 and
/// maps over 262,144 elements split, because a thread of the pool that has
/// gone to sleep takes longer to wake than half of a smaller product takes.
/// At 128 x 256 x 256 (f32), two halves ran at 150-226 GFLOP/s this way
/// against 93-150 on one core and 90-137 handed to sleeping threads.
///
/// The thread standing by does not sleep while it waits: it yields its
/// core at every turn (a system call that returns at once when nothing
/// else wants the core), and naps only after 2 ms without work. On a
/// quiet machine the program therefore keeps two cores busy for the
/// duration of `work`. On a busy one a yielding thread takes little from
/// the others, and the calling thread stops handing halves over once they
/// keep coming back late (a half of a product later than its own by more
/// than its own took, plus 100 microseconds, eight times more often than
/// not). With a busy loop on one of two cores, an f32 training step of
/// the comparison example ran at 45-72 GFLOP/s this way, against 65 on one
/// core; when the thread spun instead, at 7-47. The numbers are those of
/// one core: every element of a product or a map is computed as it would
/// be whole.
///
/// It runs `work` on the calling thread as it is without the `threads`
/// feature, with fewer than two threads in rayon's pool, and when called
/// from a thread of the pool, from inside another `on_awake_cores`, or
/// from a shard of [`Training::run_sharded`](crate::Training::run_sharded).
///
/// # Example
///
/// A batch through an affine map, inside and outside: the same numbers.
///
/// ```
/// use revdiff::{on_awake_cores, Affine, Map};
/// use ndarray::{Array1, Array2};
///
/// let w = Array2::from_shape_fn((256, 256), |(i, j)| ((i + 2 * j) % 7) as f64 - 3.0);
/// let input = ((w, Array1::zeros(256)), Array2::from_shape_fn((128, 256), |(i, j)| ((i * j) % 5) as f64));
/// let alone = Affine.forward(&input)?;
/// let beside = on_awake_cores(|| Affine.forward(&input))?;
/// assert_eq!(alone, beside);
/// # Ok::<(), revdiff::Error>(())
/// ```
pub fn on_awake_cores<R: Send>(work: impl FnOnce() -> R + Send) -> R {
    #[cfg(feature = "threads")]
    if spread() == Spread::Large
        && rayon::current_thread_index().is_none()
        && rayon::current_num_threads() >= 2
    {
        use std::sync::atomic::{AtomicBool, Ordering};
        let stop = AtomicBool::new(false);
        // Set however `work` ends, panics included, so that the thread
        // standing by returns and the join below completes.
        struct Stop<'a>(&'a AtomicBool, Spread);
        impl Drop for Stop<'_> {
            fn drop(&mut self) {
                self.0.store(true, Ordering::Release);
                SPREAD.with(|s| s.set(self.1));
            }
        }
        // The join runs `work` on one of the pool's threads and offers the
        // standing by to the others: the first that steals takes it (a
        // thread steals the oldest job first, so this one, before any
        // half). If none does, the thread of `work` runs it after `work`,
        // when `stop` is set already, and it returns at once. Neither side
        // allocates.
        let (result, ()) = rayon::join(
            || {
                let _stop = Stop(&stop, spread());
                SPREAD.with(|s| s.set(Spread::Awake));
                STRAIN.with(|s| s.set(0));
                work()
            },
            || stand_by(&stop),
        );
        return result;
    }
    work()
}

/// Takes rayon's jobs (the halves) until `stop` is set, yielding its core
/// between them.
#[cfg(feature = "threads")]
fn stand_by(stop: &std::sync::atomic::AtomicBool) {
    use std::sync::atomic::Ordering;
    use std::time::{Duration, Instant};
    // A thread in the middle of other work (another `on_awake_cores`, or
    // standing by already) that steals this job while it waits does not
    // stand by: it would hold up its own work until this one ends, and two
    // such threads holding each other's would never end.
    if spread() != Spread::Large {
        return;
    }
    SPREAD.with(|s| s.set(Spread::StandingBy));
    struct Back;
    impl Drop for Back {
        fn drop(&mut self) {
            SPREAD.with(|s| s.set(Spread::Large));
        }
    }
    let _back = Back;
    // Between halves it yields its core at every turn rather than spin, so
    // that on a busy machine it takes little from other threads (the one
    // it stands by for included); after 2 ms without work (the other
    // thread gave up handing halves over, or does something else) it naps.
    let mut idle_since: Option<Instant> = None;
    while !stop.load(Ordering::Acquire) {
        if let Some(rayon::Yield::Executed) = rayon::yield_now() {
            idle_since = None;
            continue;
        }
        let since = *idle_since.get_or_insert_with(Instant::now);
        if since.elapsed() > Duration::from_millis(2) {
            std::thread::sleep(Duration::from_micros(200));
        } else {
            std::thread::yield_now();
        }
    }
}

#[cfg(all(test, feature = "threads"))]
mod tests {
    use super::*;
    use std::time::Duration;

    fn gives_up(lateness: &[bool]) -> bool {
        let mut strain = 0;
        lateness.iter().any(|&late| {
            strain = strain_after(strain, late);
            strain >= GIVE_UP_AT
        })
    }

    #[test]
    fn eight_late_halves_more_than_prompt_ones_give_up() {
        assert!(gives_up(&[true; 8]));
        assert!(!gives_up(&[true; 7]));
        // One late half in three keeps the strain flat: not given up.
        let mixed: Vec<bool> = (0..300).map(|i| i % 3 == 0).collect();
        assert!(!gives_up(&mixed));
        // Prompt halves first do not make room for more late ones.
        let mut after_prompt = vec![false; 50];
        after_prompt.extend([true; 8]);
        assert!(gives_up(&after_prompt));
    }

    #[test]
    fn a_pool_of_one_thread_gets_no_halves() {
        let pool = |n| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .unwrap()
        };
        let large = 1 << 26;
        // The same thread state (`Spread::Large`) in both pools: only the
        // pool's size differs.
        let one = pool(1).install(|| (split_elements(large), product_split(1024, large)));
        assert_eq!(one, (false, ProductSplit::Whole));
        let two = pool(2).install(|| (split_elements(large), product_split(1024, large)));
        assert_eq!(two, (true, ProductSplit::Halves));
    }

    #[test]
    fn late_means_longer_than_the_own_half_and_a_margin() {
        let ms = Duration::from_millis;
        assert!(!is_late(ms(1), ms(1)));
        assert!(!is_late(ms(1), Duration::from_micros(1_099)));
        assert!(is_late(ms(1), Duration::from_micros(1_101)));
        // A slice of the scheduler lost in the middle of a short half.
        assert!(is_late(Duration::from_micros(50), ms(3)));
    }
}
