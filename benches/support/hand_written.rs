//! The hand-written baselines the library is measured against: the same
//! multilayer perceptron, loss and Adam written directly in ndarray, as
//! efficiently as ndarray allows (products into buffers allocated once,
//! elementwise updates in place over slices, no input change for the
//! first layer, the library's vectorised `tanh`), and the same code with
//! the library's kernels: its product and, for the elementwise loops, the
//! widest vector instructions (`Network::with_library_kernels`).
//!
//! Shared by `benches/against_hand_written.rs` and
//! `examples/against_hand_written.rs` through `#[path]`.

#![allow(dead_code)]

use ndarray::linalg::general_mat_mul;
use ndarray::{Array1, Array2, ArrayView2};
use revdiff::Real;

/// The sizes of a measured network and its batches: layer widths
/// `w0 -> w1 (tanh) -> w2 (tanh) -> w3`, and rows per batch.
#[derive(Clone, Copy, Debug)]
pub struct Workload {
    pub widths: [usize; 4],
    pub batch: usize,
}

/// The workload the targets are set for: 256 -> 256 (tanh) -> 256 (tanh)
/// -> 10, batches of 128.
pub const MEASURED: Workload = Workload {
    widths: [256, 256, 256, 10],
    batch: 128,
};
/// Layer widths of the measured network.
pub const WIDTHS: [usize; 4] = MEASURED.widths;
/// Rows per batch of the measured workload.
pub const BATCH: usize = MEASURED.batch;

/// One affine layer's weights `(out, in)` and bias `(out,)`.
pub type Layer<T> = (Array2<T>, Array1<T>);
/// The library's parameter layout for the network: `((l1, l2), l3)`.
pub type Params<T> = ((Layer<T>, Layer<T>), Layer<T>);

fn real<T: Real>(v: f64) -> T {
    T::from(v).unwrap()
}

/// The same network as a library composite, parameters `((l1, l2), l3)`.
pub type Mlp = revdiff::ThenParametrised<
    revdiff::ThenParametrised<
        revdiff::Then<revdiff::Affine, revdiff::Tanh>,
        revdiff::Then<revdiff::Affine, revdiff::Tanh>,
    >,
    revdiff::Affine,
>;

/// The library's form of the measured network.
pub fn library_model() -> Mlp {
    use revdiff::{Affine, Compose, Parametrised, Tanh};
    Affine
        .then(Tanh)
        .then_parametrised(Affine.then(Tanh))
        .then_parametrised(Affine)
}

/// One library training run: `epochs` epochs of Adam (learning rate `lr`)
/// on mean squared error, in batches of `batch` rows.
pub fn library_training<T: Real>(
    model: &Mlp,
    batch: usize,
    epochs: usize,
    start: &Params<T>,
    examples: &revdiff::Examples<T>,
    lr: T,
) -> revdiff::Trained<Params<T>, T> {
    let mut adam = revdiff::Adam::new(lr).unwrap();
    revdiff::Training::new(epochs, batch)
        .unwrap()
        .run(
            model,
            &revdiff::MeanSquaredError,
            &mut adam,
            start.clone(),
            examples,
            |_| {},
        )
        .unwrap()
}

/// The buffers of the library's gradient, kept from call to call as a
/// training loop keeps them.
pub struct LibraryGradient<T: Real> {
    model_work: revdiff::Workspace,
    loss_work: revdiff::Workspace,
    prediction_change: Array2<T>,
    /// The last gradient.
    pub gradient: Params<T>,
}

impl<T: Real> LibraryGradient<T> {
    /// Empty workspaces and a zero gradient shaped like `p`.
    pub fn new(p: &Params<T>) -> Self {
        use revdiff::Space;
        LibraryGradient {
            model_work: revdiff::Workspace::new(),
            loss_work: revdiff::Workspace::new(),
            prediction_change: Array2::zeros((0, 0)),
            gradient: p.zero_like(),
        }
    }

    /// The library's gradient of mean squared error over one batch: the
    /// model's and the loss's reusing forward and backward passes; returns
    /// the loss.
    pub fn run(&mut self, model: &Mlp, (p, x): &(Params<T>, Array2<T>), targets: &Array2<T>) -> T {
        use revdiff::{MeanSquaredError, SplitInput};
        let y = model.forward_split(p, x, &mut self.model_work).unwrap();
        let l = *MeanSquaredError
            .forward_split(y, targets, &mut self.loss_work)
            .unwrap();
        if self.prediction_change.dim() != y.dim() {
            self.prediction_change = Array2::zeros(y.dim());
        }
        MeanSquaredError
            .backward_split(
                y,
                targets,
                &mut self.loss_work,
                &T::one(),
                &mut self.prediction_change,
                None,
            )
            .unwrap();
        model
            .backward_split(
                p,
                x,
                &mut self.model_work,
                &self.prediction_change,
                &mut self.gradient,
                None,
            )
            .unwrap();
        l
    }
}

/// Deterministic starting parameters for layer widths `widths`, scaled by
/// `1 / sqrt(fan in)`.
pub fn start<T: Real>(widths: [usize; 4]) -> Params<T> {
    let layer = |k: usize| -> Layer<T> {
        let (out, inp) = (widths[k + 1], widths[k]);
        let scale = 1.0 / (inp as f64).sqrt();
        let w = Array2::from_shape_fn((out, inp), |(i, j)| {
            real::<T>(((i * 31 + j * 17 + k * 7) % 23) as f64 / 11.5 - 1.0) * real::<T>(scale)
        });
        (
            w,
            Array1::from_shape_fn(out, |i| real((i % 5) as f64 * 0.01)),
        )
    };
    ((layer(0), layer(1)), layer(2))
}

/// Deterministic data: `rows` inputs of width `widths[0]` and targets of
/// width `widths[3]`.
pub fn data<T: Real>(widths: [usize; 4], rows: usize) -> (Array2<T>, Array2<T>) {
    let x = Array2::from_shape_fn((rows, widths[0]), |(i, j)| {
        real(((i * 13 + j * 29) % 37) as f64 / 18.5 - 1.0)
    });
    let t = Array2::from_shape_fn((rows, widths[3]), |(i, j)| {
        real(((i * 7 + j * 3) % 11) as f64 / 11.0)
    });
    (x, t)
}

/// Buffers for one batch, allocated once.
pub struct Network<T> {
    pub params: [Layer<T>; 3],
    grads: [Layer<T>; 3],
    acts: [Array2<T>; 3],
    dacts: [Array2<T>; 2],
    dy: Array2<T>,
    adam_m: Vec<T>,
    adam_v: Vec<T>,
    steps: i32,
    /// Whether the products go through the library's kernel
    /// (`Real::product_into`) rather than ndarray's `general_mat_mul`, and
    /// the elementwise loops are compiled for the processor's widest
    /// vector instructions as the library's are, rather than for the
    /// target's baseline.
    library_kernels: bool,
}

/// Runs `loops` compiled for the widest vector instructions of this
/// processor (AVX2 or AVX-512 on x86-64, chosen at run time through
/// `pulp`, as the library's own elementwise loops are) when `wide`, and
/// as built otherwise.
#[inline(always)]
fn vector_loops<R>(wide: bool, loops: impl FnOnce() -> R) -> R {
    if wide {
        pulp::Arch::new().dispatch(loops)
    } else {
        loops()
    }
}

/// `c = alpha a b + beta c`, through ndarray or through the library's
/// product kernel.
fn mat_mul<T: Real>(
    library: bool,
    alpha: T,
    a: ArrayView2<'_, T>,
    b: ArrayView2<'_, T>,
    beta: T,
    c: &mut Array2<T>,
) {
    if library {
        T::product_into(alpha, a, b, beta, c.view_mut());
    } else {
        general_mat_mul(alpha, &a, &b, beta, c);
    }
}

impl<T: Real> Network<T> {
    /// Buffers for batches of `batch` rows, starting from `p` (whose
    /// shapes give the widths).
    pub fn new(p: &Params<T>, batch: usize) -> Self {
        let ((l1, l2), l3) = p.clone();
        let params = [l1, l2, l3];
        let outs = [0, 1, 2].map(|k| params[k].0.nrows());
        let grads = params
            .clone()
            .map(|(w, b)| (Array2::zeros(w.raw_dim()), Array1::zeros(b.len())));
        let n: usize = params.iter().map(|(w, b)| w.len() + b.len()).sum();
        Network {
            params,
            grads,
            acts: [0, 1, 2].map(|k| Array2::zeros((batch, outs[k]))),
            dacts: [0, 1].map(|k| Array2::zeros((batch, outs[k]))),
            dy: Array2::zeros((batch, outs[2])),
            adam_m: vec![T::zero(); n],
            adam_v: vec![T::zero(); n],
            steps: 0,
            library_kernels: false,
        }
    }

    /// The same network with its products through the library's kernel
    /// (`Real::product_into`) and its elementwise loops compiled for the
    /// widest vector instructions: what the code costs by hand with the
    /// same kernels as the library's.
    pub fn with_library_kernels(p: &Params<T>, batch: usize) -> Self {
        Network {
            library_kernels: true,
            ..Network::new(p, batch)
        }
    }

    /// The forward pass into the activation buffers; returns nothing.
    pub fn forward(&mut self, x: &Array2<T>) {
        self.forward_pass(x, true);
    }

    /// The forward pass; with `elementwise` false, only its matrix products.
    fn forward_pass(&mut self, x: &Array2<T>, elementwise: bool) {
        for k in 0..3 {
            let (w, b) = &self.params[k];
            let (before, rest) = self.acts.split_at_mut(k);
            let out = &mut rest[0];
            if elementwise {
                // The bias in every row: a copy per row, not a broadcast
                // through a `Zip`.
                let b = b.as_slice().unwrap();
                for row in out.as_slice_mut().unwrap().chunks_exact_mut(b.len()) {
                    row.copy_from_slice(b);
                }
            }
            let input = if k == 0 {
                x.view()
            } else {
                before[k - 1].view()
            };
            let keep = if elementwise { T::one() } else { T::zero() };
            mat_mul(self.library_kernels, T::one(), input, w.t(), keep, out);
            if elementwise && k < 2 {
                // The same vectorised tanh as the library's (public through
                // `Real`), so that the ratio measures composition alone.
                let out = out.as_slice_mut().unwrap();
                vector_loops(self.library_kernels, || {
                    out.iter_mut().for_each(|v| *v = v.vector_tanh())
                });
            }
        }
    }

    /// Mean squared error against `t` and its gradient into the grad
    /// buffers (forward included).
    pub fn gradient(&mut self, x: &Array2<T>, t: &Array2<T>) -> T {
        self.gradient_pass(x, Some(t))
    }

    /// Only the matrix products of [`gradient`](Self::gradient), into the
    /// same buffers: what the step's products cost by themselves, the
    /// ceiling of its effective GFLOP/s.
    pub fn products_only(&mut self, x: &Array2<T>) {
        self.gradient_pass(x, None);
    }

    /// The gradient against `targets`; without them, only the products
    /// (the change of the output is whatever the buffer holds).
    fn gradient_pass(&mut self, x: &Array2<T>, targets: Option<&Array2<T>>) -> T {
        let elementwise = targets.is_some();
        self.forward_pass(x, elementwise);
        let n: T = real(self.dy.len() as f64);
        let mut total = T::zero();
        let library = self.library_kernels;
        if let Some(t) = targets {
            let (dy, y, t) = (
                self.dy.as_slice_mut().unwrap(),
                self.acts[2].as_slice().unwrap(),
                t.as_slice().unwrap(),
            );
            let two = real::<T>(2.0);
            vector_loops(library, || {
                for ((d, &y), &t) in dy.iter_mut().zip(y).zip(t) {
                    let r = y - t;
                    total = total + r * r;
                    *d = two * r / n;
                }
            });
        }
        // Layer 3, then 2, then 1: `upstream` is the change of the layer's
        // output before its activation; the first layer's input change is
        // skipped.
        for k in (0..3).rev() {
            let (lower, upper) = self.dacts.split_at_mut(k);
            let upstream: &Array2<T> = if k == 2 { &self.dy } else { &upper[0] };
            let input = if k == 0 {
                x.view()
            } else {
                self.acts[k - 1].view()
            };
            let (gw, gb) = &mut self.grads[k];
            mat_mul(library, T::one(), upstream.t(), input.view(), T::zero(), gw);
            if elementwise {
                let gb = gb.as_slice_mut().unwrap();
                let rows = upstream.as_slice().unwrap().chunks_exact(gb.len());
                vector_loops(library, || {
                    gb.fill(T::zero());
                    for row in rows {
                        gb.iter_mut().zip(row).for_each(|(g, &r)| *g = *g + r);
                    }
                });
            }
            if k > 0 {
                let target = &mut lower[k - 1];
                mat_mul(
                    library,
                    T::one(),
                    upstream.view(),
                    self.params[k].0.view(),
                    T::zero(),
                    target,
                );
                if elementwise {
                    let (d, a) = (
                        target.as_slice_mut().unwrap(),
                        self.acts[k - 1].as_slice().unwrap(),
                    );
                    vector_loops(library, || {
                        d.iter_mut()
                            .zip(a)
                            .for_each(|(d, &a)| *d = *d * (T::one() - a * a))
                    });
                }
            }
        }
        total / n
    }

    /// The last gradient, in the library's parameter layout.
    pub fn gradient_as_params(&self) -> Params<T> {
        let [l1, l2, l3] = self.grads.clone();
        ((l1, l2), l3)
    }

    /// Adam (Kingma and Ba, 2015), learning rate `lr`, in place.
    pub fn adam(&mut self, lr: T) {
        self.steps += 1;
        let (b1, b2, eps): (T, T, T) = (real(0.9), real(0.999), real(1e-8));
        let (c1, c2) = (
            T::one() - b1.powi(self.steps),
            T::one() - b2.powi(self.steps),
        );
        let mut at = 0;
        for ((w, b), (gw, gb)) in self.params.iter_mut().zip(&self.grads) {
            for (p, g) in [
                (w.as_slice_mut().unwrap(), gw.as_slice().unwrap()),
                (b.as_slice_mut().unwrap(), gb.as_slice().unwrap()),
            ] {
                let m = &mut self.adam_m[at..at + p.len()];
                let v = &mut self.adam_v[at..at + p.len()];
                vector_loops(self.library_kernels, || {
                    for (((p, g), m), v) in p.iter_mut().zip(g).zip(m).zip(v) {
                        *m = b1 * *m + (T::one() - b1) * *g;
                        *v = b2 * *v + (T::one() - b2) * *g * *g;
                        *p = *p - lr * (*m / c1) / ((*v / c2).sqrt() + eps);
                    }
                });
                at += p.len();
            }
        }
    }
}

/// Floating-point operations of one training step (matrix products only):
/// forward 2 n k m per layer, backward twice that (less the first layer's
/// input change).
pub fn step_flops(w: Workload) -> f64 {
    let mut total = 0.0;
    for k in 0..3 {
        let per = 2.0 * (w.batch * w.widths[k] * w.widths[k + 1]) as f64;
        total += per * if k == 0 { 2.0 } else { 3.0 };
    }
    total
}
