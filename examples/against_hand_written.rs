//! The library against hand-written ndarray code doing the same math, in
//! one process, the two sides alternating (7 rounds, medians), and its
//! composition costs. Ends with one line per measure:
//! `measure<TAB>ratio<TAB>target<TAB>ok|over`.
//!
//! `cargo run --release --example against_hand_written` (add `-- quick` for
//! fewer repetitions, as CI does). The targets are set for one network and
//! batch size; the same training and gradient ratios are also measured at
//! four other sizes (`OTHER_WORKLOADS`), to show that they do not hold at
//! one size only (`-- workloads` runs only those).

#[path = "../benches/support/chains.rs"]
mod chains;
#[path = "../benches/support/circuits.rs"]
mod circuits;
#[path = "../benches/support/hand_written.rs"]
mod hand_written;

use chains::{double, sine_chains};

use hand_written::{
    BATCH, LibraryGradient, MEASURED, Network, Params, WIDTHS, Workload, data, library_model,
    library_training, start, step_flops,
};
use ndarray::{Array1, Array2, ArrayD};
use rand::SeedableRng;
use rand::rngs::StdRng;
use rand::seq::SliceRandom;
use revdiff::bits::Bits;
use revdiff::{
    Adam, Boxed, Chain, Compose, Examples, Map, MeanSquaredError, Real, ShardSum, Sin, Space,
    SplitInput, Training, Workspace, on_awake_cores,
};
use std::alloc::{GlobalAlloc, Layout, System};
use std::hint::black_box;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

/// Counts heap allocations, so that allocations per step are measured.
struct Counting;
static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

// SAFETY is not ours to claim: the crate forbids unsafe code, but a global
// allocator needs `unsafe impl`. It only forwards to the system allocator.
#[allow(unsafe_code)]
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Median seconds per call of each side, the sides alternating.
fn race(rounds: usize, reps: usize, mut a: impl FnMut(), mut b: impl FnMut()) -> (f64, f64) {
    let (mut ta, mut tb) = (Vec::new(), Vec::new());
    a();
    b();
    for _ in 0..rounds {
        let t = Instant::now();
        for _ in 0..reps {
            a();
        }
        ta.push(t.elapsed().as_secs_f64() / reps as f64);
        let t = Instant::now();
        for _ in 0..reps {
            b();
        }
        tb.push(t.elapsed().as_secs_f64() / reps as f64);
    }
    (median(ta), median(tb))
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

struct Line {
    measure: String,
    value: f64,
    target: &'static str,
    ok: bool,
}

fn at_most(measure: impl Into<String>, value: f64, limit: f64, target: &'static str) -> Line {
    Line {
        measure: measure.into(),
        value,
        target,
        ok: value <= limit,
    }
}

/// Steps per measured training run, and rows of data for it.
const STEPS_PER_EPOCH: usize = 8;

/// The training lines for workload `w`; `name` names the element type
/// and, for a workload other than [`MEASURED`], the workload.
fn training_lines<T: Real>(
    name: &str,
    w: Workload,
    rounds: usize,
    epochs: usize,
    lines: &mut Vec<Line>,
) {
    let measured = w.widths == MEASURED.widths && w.batch == MEASURED.batch;
    let model = library_model();
    let batch = w.batch;
    let rows = batch * STEPS_PER_EPOCH;
    let (x, t) = data::<T>(w.widths, rows);
    let examples = Examples::new(x.clone(), t.clone()).unwrap();
    let p0: Params<T> = start(w.widths);
    let lr = T::from(1e-3).unwrap();
    // A workload other than the measured one runs more epochs and
    // repetitions when one run is short (up to 16 times, for about 5 ms a
    // run), so that a timed stretch is not lost in the machine's noise.
    let scale = if measured {
        1
    } else {
        let once = Instant::now();
        black_box(library_training(&model, batch, epochs, &p0, &examples, lr));
        (0.005 / once.elapsed().as_secs_f64())
            .round()
            .clamp(1.0, 16.0) as usize
    };
    let (epochs, reps) = (epochs * scale, 5 * scale);

    // One training run of `epochs` epochs on each side.
    let library = || {
        black_box(library_training(&model, batch, epochs, &p0, &examples, lr));
    };
    let mut order: Vec<usize> = (0..rows).collect();
    let mut rng = StdRng::seed_from_u64(0);
    let mut xb = Array2::<T>::zeros((batch, w.widths[0]));
    let mut tb = Array2::<T>::zeros((batch, w.widths[3]));
    // Like the library's run, each run starts from the same parameters with
    // fresh buffers and optimiser state. `same_kernels`: the products
    // through the library's kernel instead of ndarray's, and the
    // elementwise loops on the widest vector instructions.
    let mut by_hand = |same_kernels: bool| {
        let mut net = if same_kernels {
            Network::with_library_kernels(&p0, batch)
        } else {
            Network::new(&p0, batch)
        };
        for _ in 0..epochs {
            order.shuffle(&mut rng);
            for chunk in order.chunks(batch) {
                for (i, &r) in chunk.iter().enumerate() {
                    xb.row_mut(i).assign(&x.row(r));
                    tb.row_mut(i).assign(&t.row(r));
                }
                black_box(net.gradient(&xb, &tb));
                net.adam(lr);
            }
        }
        black_box(&net.params);
    };
    let (lib, hand) = race(rounds, 1, library, || by_hand(false));
    let steps = (epochs * STEPS_PER_EPOCH) as f64;
    lines.push(at_most(
        format!("training step {name}, library / hand-written"),
        lib / hand,
        1.05,
        "<= 1.05",
    ));
    // The library's products are faster than ndarray's, and its
    // elementwise loops run on the widest vector instructions: against
    // code by hand with the same kernels (products and loops), the ratio
    // is composition's cost alone. That side runs in `on_awake_cores` as
    // the library's run does, so that both sides' products split over the
    // cores the same way (its hand-written elementwise loops stay whole).
    let (lib_again, hand_same) = race(rounds, 1, library, || on_awake_cores(|| by_hand(true)));
    lines.push(at_most(
        format!("training step {name}, library / hand-written with the library's kernels"),
        lib_again / hand_same,
        1.05,
        "<= 1.05",
    ));
    if name == "f32" && measured {
        let xb = x.slice(ndarray::s![..batch, ..]).to_owned();
        let mut ndarray_net = Network::new(&p0, batch);
        let mut library_net = Network::with_library_kernels(&p0, batch);
        let (by_ndarray, by_library) = race(
            rounds,
            20,
            || ndarray_net.products_only(black_box(&xb)),
            || library_net.products_only(black_box(&xb)),
        );
        println!(
            "f32 training step's matrix products alone: {:.1} GFLOP/s through the library's kernel, {:.1} through ndarray's threaded product",
            step_flops(w) / by_library / 1e9,
            step_flops(w) / by_ndarray / 1e9
        );
        println!(
            "f32 training step: library {:.1} GFLOP/s, hand-written {:.1} GFLOP/s (matrix products only)",
            step_flops(w) * steps / lib / 1e9,
            step_flops(w) * steps / hand / 1e9
        );
        lines.push(Line {
            measure: "effective GFLOP/s of an f32 training step (matrix products)".into(),
            value: step_flops(w) * steps / lib / 1e9,
            target: ">= 100",
            ok: step_flops(w) * steps / lib / 1e9 >= 100.0,
        });
    }

    // The gradient alone, one batch.
    let xb: Array2<T> = x.slice(ndarray::s![..batch, ..]).to_owned();
    let tbatch: Array2<T> = t.slice(ndarray::s![..batch, ..]).to_owned();
    let input = (p0.clone(), xb.clone());
    let mut buffers = LibraryGradient::new(&p0);
    let lib_gradient = || {
        black_box(buffers.run(&model, &input, &tbatch));
    };
    let mut net = Network::new(&p0, batch);
    let hand_gradient = || {
        black_box(net.gradient(&xb, &tbatch));
    };
    // Both sides compute the same gradient (checked, not assumed).
    {
        use revdiff::Euclidean;
        let mut check_buffers = LibraryGradient::new(&p0);
        check_buffers.run(&model, &input, &tbatch);
        // Twice: the second call reuses every buffer of the first.
        check_buffers.run(&model, &input, &tbatch);
        let dp = &check_buffers.gradient;
        let (y, _) = Map::<(Params<T>, Array2<T>)>::forward_memo(&model, &input).unwrap();
        let l = MeanSquaredError.forward(&(y, tbatch.clone())).unwrap();
        let mut check = Network::new(&p0, batch);
        let hand_loss = check.gradient(&xb, &tbatch);
        let (a, b) = (dp.coordinates(), check.gradient_as_params().coordinates());
        let scale = b.iter().fold(T::zero(), |m, v| m.max(v.abs()));
        let worst = a
            .iter()
            .zip(&b)
            .fold(T::zero(), |m, (p, q)| m.max((*p - *q).abs()));
        let tol = T::from(1e-4).unwrap();
        assert!(
            worst <= tol * scale,
            "{name}: gradients differ by {worst} (scale {scale})"
        );
        assert!(
            (l - hand_loss).abs() <= tol * l.abs(),
            "{name}: losses {l} and {hand_loss}"
        );
    }
    let (lib, hand) = race(rounds, reps, lib_gradient, hand_gradient);
    lines.push(at_most(
        format!("gradient {name}, library / hand-written"),
        lib / hand,
        1.05,
        "<= 1.05",
    ));
    let mut same = Network::with_library_kernels(&p0, batch);
    let (lib, hand) = race(
        rounds,
        reps,
        || {
            black_box(buffers.run(&model, &input, &tbatch));
        },
        || {
            black_box(same.gradient(&xb, &tbatch));
        },
    );
    lines.push(at_most(
        format!("gradient {name}, library / hand-written with the library's kernels"),
        lib / hand,
        1.05,
        "<= 1.05",
    ));

    // Backward against forward, the library's own reusing passes (the
    // backward pass skips the first layer's input change, as training does).
    let (p, xb) = &input;
    let mut forward_work = Workspace::new();
    let mut backward_work = Workspace::new();
    model.forward_split(p, xb, &mut backward_work).unwrap();
    let dy = Array2::<T>::ones((batch, w.widths[3]));
    let mut dp = p.zero_like();
    let (back, fwd) = race(
        rounds,
        reps,
        || {
            model
                .backward_split(p, xb, &mut backward_work, &dy, &mut dp, None)
                .unwrap();
            black_box(&dp);
        },
        || {
            model.forward_split(p, xb, &mut forward_work).unwrap();
            black_box(&forward_work);
        },
    );
    lines.push(at_most(
        format!("backward / forward {name}, library"),
        back / fwd,
        2.2,
        "<= 2.2",
    ));

    // Heap allocations per step after warm-up: the difference between runs
    // of two lengths, per extra step.
    if name == "f64" && measured {
        let count = |epochs: usize| {
            let before = ALLOCATIONS.load(Ordering::Relaxed);
            black_box(library_training(&model, batch, epochs, &p0, &examples, lr));
            ALLOCATIONS.load(Ordering::Relaxed) - before
        };
        let (short, long) = (count(1), count(3));
        let per_step = (long - short) as f64 / (2 * STEPS_PER_EPOCH) as f64;
        // The floor: ndarray's matrix kernel (matrixmultiply) allocates its
        // packing buffers inside every product, hand-written code included.
        let mut net = Network::new(&p0, batch);
        let xb: Array2<T> = x.slice(ndarray::s![..batch, ..]).to_owned();
        let tb: Array2<T> = t.slice(ndarray::s![..batch, ..]).to_owned();
        net.gradient(&xb, &tb);
        let before = ALLOCATIONS.load(Ordering::Relaxed);
        for _ in 0..4 {
            black_box(net.gradient(&xb, &tb));
            net.adam(lr);
        }
        let hand_per_step = (ALLOCATIONS.load(Ordering::Relaxed) - before) as f64 / 4.0;
        println!("allocations per step: library {per_step}, hand-written {hand_per_step}");
        lines.push(Line {
            measure: "heap allocations per training step after warm-up".into(),
            value: per_step,
            target: "0",
            ok: per_step == 0.0,
        });
    }
}

fn chain_lines(rounds: usize, lines: &mut Vec<Line>) {
    let x = 0.7_f64;
    let s8 = double(double(double(Sin)));
    let s1024 = double(double(double(double(double(double(double(s8)))))));
    let (t8, t1024) = race(
        rounds,
        2000,
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
        || {
            black_box(s1024.backward(black_box(&x), &1.0).unwrap());
        },
    );
    lines.push(at_most(
        "time per stage, static scalar chain, n = 1024 / n = 8",
        (t1024 / 1024.0) / (t8 / 8.0),
        1.2,
        "<= 1.2",
    ));

    // Run-time chains: the same sine stages over one-element arrays, through
    // the reusing passes (kept workspaces, the fast path) and through the
    // memo passes (`backward`). The stages are per-element (the sine as a
    // scalar map, `push_per_element`); the same chains of array stages
    // (`push_elementwise`) are printed for comparison.
    let chain_of = |n: usize, width: usize, per_element: bool| {
        let mut chain = Chain::<f64>::new(&[width]);
        for _ in 0..n {
            if per_element {
                chain.push_per_element("sin", Sin).unwrap();
            } else {
                chain.push_elementwise("sin", Sin).unwrap();
            }
        }
        chain
    };
    let run_time = |n: usize, width: usize| chain_of(n, width, true);
    let (c10, c10k) = (run_time(10, 1), run_time(10_000, 1));
    let xd = ArrayD::from_elem(vec![1], 0.7);
    let (mut w10, mut w10k) = (Workspace::new(), Workspace::new());
    let (mut d10, mut d10k) = (xd.clone(), xd.clone());
    let (t10, t10k) = race(
        rounds,
        10,
        || reused(&c10, &xd, &xd, &mut w10, &mut d10),
        || reused(&c10k, &xd, &xd, &mut w10k, &mut d10k),
    );
    lines.push(at_most(
        "time per stage, run-time chain, n = 10,000 / n = 10 (reusing passes)",
        (t10k / 10_000.0) / (t10 / 10.0),
        1.2,
        "<= 1.2",
    ));
    let (t10, t10k) = race(
        rounds,
        10,
        || {
            black_box(c10.backward(&xd, &xd).unwrap());
        },
        || {
            black_box(c10k.backward(&xd, &xd).unwrap());
        },
    );
    lines.push(at_most(
        "time per stage, run-time chain, n = 10,000 / n = 10 (memo passes)",
        (t10k / 10_000.0) / (t10 / 10.0),
        1.2,
        "<= 1.2",
    ));
    let c8 = run_time(8, 1);
    let (mut w8, mut d8) = (Workspace::new(), xd.clone());
    let (dynamic, fixed) = race(
        rounds,
        2000,
        || reused(&c8, &xd, &xd, &mut w8, &mut d8),
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
    );
    let array_stages = chain_of(8, 1, false);
    let (mut wa, mut da) = (Workspace::new(), xd.clone());
    let (arrays, _) = race(
        rounds,
        2000,
        || reused(&array_stages, &xd, &xd, &mut wa, &mut da),
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
    );
    println!(
        "scalar chains of 8 stages, per pass pair: static {:.0} ns, run-time chain (reusing passes) {:.0} ns, the same of array stages (push_elementwise) {:.0} ns",
        fixed * 1e9,
        dynamic * 1e9,
        arrays * 1e9
    );
    lines.push(at_most(
        "dynamic / static, scalar chains of 8 stages (reusing passes)",
        dynamic / fixed,
        1.5,
        "<= 1.5",
    ));
    let (dynamic, fixed) = race(
        rounds,
        2000,
        || {
            black_box(c8.backward(&xd, &xd).unwrap());
        },
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
    );
    lines.push(at_most(
        "dynamic / static, scalar chains of 8 stages (memo passes)",
        dynamic / fixed,
        1.5,
        "<= 1.5",
    ));
    let mut boxed: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
    for _ in 1..8 {
        boxed = Boxed::new(boxed.then(Sin)).unwrap();
    }
    let (mut wb, mut db) = (Workspace::new(), 0.0);
    let (nested, fixed) = race(
        rounds,
        2000,
        || reused(&boxed, &x, &1.0, &mut wb, &mut db),
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
    );
    lines.push(at_most(
        "nested boxed / static, scalar chains of 8 stages (reusing passes)",
        nested / fixed,
        1.5,
        "<= 1.5",
    ));
    let (nested, fixed) = race(
        rounds,
        2000,
        || {
            black_box(boxed.backward(black_box(&x), &1.0).unwrap());
        },
        || {
            black_box(s8.backward(black_box(&x), &1.0).unwrap());
        },
    );
    lines.push(at_most(
        "nested boxed / static, scalar chains of 8 stages (memo passes)",
        nested / fixed,
        1.5,
        "<= 1.5",
    ));

    // 256-wide arrays: run-time chain against the static composite, each
    // through its reusing passes.
    let wide = Array1::<f64>::linspace(-1.0, 1.0, 256);
    let wide_d = wide.clone().into_dyn();
    let c8w = run_time(8, 256);
    let (mut wd, mut dd) = (Workspace::new(), wide_d.clone());
    let (mut ws, mut ds) = (Workspace::new(), wide.clone());
    let (dynamic, fixed) = race(
        rounds,
        200,
        || reused(&c8w, &wide_d, &wide_d, &mut wd, &mut dd),
        || reused(&s8, &wide, &wide, &mut ws, &mut ds),
    );
    lines.push(at_most(
        "dynamic / static, 8 stages on 256-wide arrays (reusing passes)",
        dynamic / fixed,
        1.02,
        "<= 1.02",
    ));
    let (dynamic, fixed) = race(
        rounds,
        200,
        || {
            black_box(c8w.backward(&wide_d, &wide_d).unwrap());
        },
        || {
            black_box(s8.backward(black_box(&wide), &wide).unwrap());
        },
    );
    lines.push(at_most(
        "dynamic / static, 8 stages on 256-wide arrays (memo passes)",
        dynamic / fixed,
        1.02,
        "<= 1.02",
    ));
}

/// Bit-sliced gates against one bool per example: the same 64-gate circuit
/// forward and backward, per example, at two batch sizes.
fn bits_lines(rounds: usize, lines: &mut Vec<Line>) {
    bits_lines_of("gate by gate", &circuits::circuit(), rounds, lines);
    bits_lines_of(
        "word by word",
        &circuits::word_by_word_circuit(),
        rounds,
        lines,
    );
}

/// The lines of one way of running the bit-sliced circuit.
fn bits_lines_of<M: Map<(Bits, Bits), Output = (Bits, Bits)>>(
    how: &str,
    model: &M,
    rounds: usize,
    lines: &mut Vec<Line>,
) {
    for count in [4096, 65_536] {
        let (input, bools) = circuits::examples(count);
        circuits::check_agreement(model, &input, &bools);
        let mut work = Workspace::new();
        let mut change = (input.0.clone(), input.1.clone());
        let (bits, by_hand) = race(
            rounds,
            20,
            || circuits::bits_pass(model, &input, &mut work, &mut change),
            || {
                black_box(circuits::bools_pass(&bools));
            },
        );
        let speed_up = by_hand / bits;
        lines.push(Line {
            measure: format!(
                "bit-sliced ({how}) / one bool per example, 64 gates forward and backward, {count} examples (speed-up)"
            ),
            value: speed_up,
            target: ">= 20",
            ok: speed_up >= 20.0,
        });
    }
}

/// One gradient through the reusing passes, into kept buffers.
fn reused<A: revdiff::Space, F: Map<A, Output = A>>(
    f: &F,
    x: &A,
    dy: &A,
    work: &mut Workspace,
    dx: &mut A,
) {
    f.forward_reusing(black_box(x), work).unwrap();
    f.backward_reusing(x, work, dy, dx).unwrap();
    black_box(&*dx);
}

/// Hessian-vector product against one backward pass of the same map.
fn hessian_ratio<A, F>(rounds: usize, reps: usize, f: &F, x: &A, v: &A) -> f64
where
    A: revdiff::Space,
    F: revdiff::Reverse<A, Output = f64>,
{
    let (hv, back) = race(
        rounds,
        reps,
        || {
            black_box(revdiff::hessian_vector(f, black_box(x), v).unwrap());
        },
        || {
            black_box(f.backward(black_box(x), &1.0).unwrap());
        },
    );
    hv / back
}

fn second_order_lines(rounds: usize, lines: &mut Vec<Line>) {
    let (s10, s100, s1000) = sine_chains();
    let (x, v) = (0.7_f64, 1.0_f64);
    for (n, ratio) in [
        (10, hessian_ratio(rounds, 2000, &s10, &x, &v)),
        (100, hessian_ratio(rounds, 100, &s100, &x, &v)),
        (1000, hessian_ratio(rounds, 3, &s1000, &x, &v)),
    ] {
        lines.push(at_most(
            format!("Hessian-vector product / backward, static scalar chain, n = {n}"),
            ratio,
            4.0,
            "<= 4",
        ));
    }
    // Stages on 256-wide arrays (sine then tanh, repeated), summed to a
    // scalar at the end.
    let a2 = Sin.then(revdiff::Tanh);
    let a8 = double(double(a2));
    let a64 = double(double(double(a8)));
    let a512 = double(double(double(a64)));
    let sum = revdiff::ElementReduction::sum;
    let row = Array1::from_elem(256, 0.3);
    for (n, ratio) in [
        (8, hessian_ratio(rounds, 200, &a8.then(sum()), &row, &row)),
        (64, hessian_ratio(rounds, 30, &a64.then(sum()), &row, &row)),
        (512, hessian_ratio(rounds, 4, &a512.then(sum()), &row, &row)),
    ] {
        lines.push(at_most(
            format!("Hessian-vector product / backward, static chain on 256-wide arrays, n = {n}"),
            ratio,
            4.0,
            "<= 4",
        ));
    }
    // The network on one row, summed to a scalar: the Hessian in the
    // parameters and the input together, along a direction of their shape.
    let model = library_model().then(revdiff::ElementReduction::sum());
    let input: (Params<f64>, Array1<f64>) =
        (start::<f64>(WIDTHS), Array1::from_elem(WIDTHS[0], 0.3));
    let direction = (start::<f64>(WIDTHS), Array1::from_elem(WIDTHS[0], -0.1));
    lines.push(at_most(
        "Hessian-vector product / backward, the network on one row",
        hessian_ratio(rounds, 3, &model, &input, &direction),
        4.0,
        "<= 4",
    ));
}

/// Networks and batches other than the measured one, so that the
/// training and gradient ratios are seen not to hold at one size only.
const OTHER_WORKLOADS: [Workload; 4] = [
    Workload {
        widths: [32, 64, 64, 4],
        batch: 16,
    },
    Workload {
        widths: [16, 32, 32, 1],
        batch: 512,
    },
    Workload {
        widths: [64, 128, 128, 10],
        batch: 64,
    },
    Workload {
        widths: [512, 512, 256, 16],
        batch: 32,
    },
];

/// The training step and gradient ratios at [`OTHER_WORKLOADS`], f64 and
/// f32: each printed, and for each measure one line with the worst of them.
fn workload_lines(rounds: usize, epochs: usize, lines: &mut Vec<Line>) {
    let mut each = Vec::new();
    for w in OTHER_WORKLOADS {
        let [a, b, c, d] = w.widths;
        let sizes = format!("{a}-{b}-{c}-{d}, batch {}", w.batch);
        training_lines::<f64>(&format!("f64 ({sizes})"), w, rounds, epochs, &mut each);
        training_lines::<f32>(&format!("f32 ({sizes})"), w, rounds, epochs, &mut each);
    }
    for l in &each {
        println!("  {}: {:.3} ({})", l.measure, l.value, l.target);
    }
    let same = " with the library's kernels";
    let n = 2 * OTHER_WORKLOADS.len();
    for (what, with_same, limit, target) in [
        ("training step", false, 1.05, "<= 1.05"),
        ("training step", true, 1.05, "<= 1.05"),
        ("gradient", false, 1.05, "<= 1.05"),
        ("gradient", true, 1.05, "<= 1.05"),
        ("backward / forward", false, 2.2, "<= 2.2"),
    ] {
        let values: Vec<f64> = each
            .iter()
            .filter(|l| l.measure.starts_with(what) && l.measure.ends_with(same) == with_same)
            .map(|l| l.value)
            .collect();
        let worst = values.iter().copied().fold(f64::NAN, f64::max);
        let against = if what == "backward / forward" {
            "library".to_string()
        } else {
            format!(
                "library / hand-written{}",
                if with_same { same } else { "" }
            )
        };
        // The median says how the library does at other sizes; the worst
        // also carries the noise of one measure in `n`.
        if what != "backward / forward" {
            lines.push(at_most(
                format!("{what}, {against}, median of {n} other networks, batches and types"),
                median(values),
                limit,
                target,
            ));
        }
        lines.push(at_most(
            format!("{what}, {against}, worst of {n} other networks, batches and types"),
            worst,
            limit,
            target,
        ));
    }
}

/// Runs this program again and reads its answer. With `one_core`, one
/// thread per matrix product and per elementwise map, so that the single
/// shard uses one core and the shards, not the products, use the cores;
/// without, the single shard's large products split over the cores.
fn sharded_speed_up(rounds: usize, one_core: bool, epochs: usize) -> f64 {
    let exe = std::env::current_exe().expect("the running program has a path");
    let mut child = std::process::Command::new(exe);
    child
        .arg("shards")
        .arg(rounds.to_string())
        .arg(epochs.to_string());
    if one_core {
        child
            .env("MATMUL_NUM_THREADS", "1")
            .env("RAYON_NUM_THREADS", "1");
    }
    let out = child.output().expect("the program runs again");
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .find_map(|l| l.strip_prefix("speed-up ")?.parse().ok())
        .unwrap_or(f64::NAN)
}

/// The child's side of [`sharded_speed_up`]: one shard against two, in
/// runs of `epochs` epochs of two steps each.
fn measure_shards(rounds: usize, epochs: usize) {
    let model = library_model();
    let batch = 1024;
    let (x, t) = data::<f64>(WIDTHS, 2 * batch);
    let examples = Examples::new(x, t).unwrap();
    let p0: Params<f64> = start(WIDTHS);
    // The first step's filling of buffers (page faults on fresh memory,
    // about 9 ms on either side) weighs about a sixth of a sharded run of
    // 10 steps and a thirtieth of one of 50: the measure with its target
    // runs 50, and the short runs are printed beside it.
    let training = Training::new(epochs, batch).unwrap();
    let (one, two) = race(
        rounds,
        1,
        || {
            let mut adam = Adam::new(1e-3).unwrap();
            black_box(
                training
                    .run(
                        &model,
                        &MeanSquaredError,
                        &mut adam,
                        p0.clone(),
                        &examples,
                        |_| {},
                    )
                    .unwrap(),
            );
        },
        || {
            let mut adam = Adam::new(1e-3).unwrap();
            black_box(
                training
                    .run_sharded(
                        &model,
                        &MeanSquaredError,
                        &mut adam,
                        p0.clone(),
                        &examples,
                        2,
                        &mut ShardSum,
                        |_| {},
                    )
                    .unwrap(),
            );
        },
    );
    println!("speed-up {}", one / two);
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if args.get(1).map(String::as_str) == Some("shards") {
        measure_shards(
            args.get(2).and_then(|r| r.parse().ok()).unwrap_or(3),
            args.get(3).and_then(|e| e.parse().ok()).unwrap_or(25),
        );
        return;
    }
    let quick = args.iter().any(|a| a == "quick");
    if args.iter().any(|a| a == "bits") {
        let mut lines = Vec::new();
        bits_lines(3, &mut lines);
        for l in &lines {
            println!("{}\t{:.3}\t{}", l.measure, l.value, l.target);
        }
        return;
    }
    if args.iter().any(|a| a == "chains") {
        let mut lines = Vec::new();
        chain_lines(3, &mut lines);
        for l in &lines {
            println!("{}\t{:.3}\t{}", l.measure, l.value, l.target);
        }
        return;
    }
    if args.iter().any(|a| a == "workloads") {
        let mut lines = Vec::new();
        workload_lines(7, 4, &mut lines);
        for l in &lines {
            println!("{}\t{:.3}\t{}", l.measure, l.value, l.target);
        }
        return;
    }
    if args.iter().any(|a| a == "training") {
        // Only the training lines, as the full run measures them.
        let mut lines = Vec::new();
        training_lines::<f64>("f64", MEASURED, 7, 4, &mut lines);
        training_lines::<f32>("f32", MEASURED, 7, 4, &mut lines);
        for l in &lines {
            println!("{}\t{:.3}\t{}", l.measure, l.value, l.target);
        }
        return;
    }
    let (rounds, epochs) = if quick { (3, 1) } else { (7, 4) };
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    println!(
        "revdiff against hand-written ndarray code: {} rounds, medians, {threads} cores",
        rounds
    );
    println!(
        "network {} -> {} (tanh) -> {} (tanh) -> {}, batches of {BATCH}, mean squared error, Adam\n",
        WIDTHS[0], WIDTHS[1], WIDTHS[2], WIDTHS[3]
    );
    let mut lines = Vec::new();
    training_lines::<f64>("f64", MEASURED, rounds, epochs, &mut lines);
    training_lines::<f32>("f32", MEASURED, rounds, epochs, &mut lines);
    println!("other networks and batches:");
    workload_lines(rounds, epochs, &mut lines);
    chain_lines(rounds, &mut lines);
    second_order_lines(rounds, &mut lines);
    bits_lines(rounds, &mut lines);
    let speed_up = sharded_speed_up(rounds, true, 25);
    println!(
        "2 shards against 1 in runs of 10 steps, the first step's filling of buffers weighing more (no target): {:.2}",
        sharded_speed_up(rounds, true, 5)
    );
    println!(
        "2 shards against one shard whose products split over the cores (no target): {:.2}",
        sharded_speed_up(rounds, false, 25)
    );
    lines.push(Line {
        measure:
            "data-parallel speed-up on 2 cores, batch 1,024 (2 shards against 1, runs of 50 steps)"
                .into(),
        value: speed_up,
        target: ">= 1.7",
        ok: speed_up >= 1.7,
    });
    for l in &lines {
        println!(
            "{}\t{:.3}\t{}\t{}",
            l.measure,
            l.value,
            l.target,
            if l.ok { "ok" } else { "over" }
        );
    }
}
