//! Optimisers: stateful rules that turn a gradient into new parameters.
//!
//! Every rule acts on the flat coordinates of any [`Euclidean`] parameter
//! space (a scalar, an array, a tuple of arrays, nested tuples), so the same
//! value works for every model. Its state (velocities, moment estimates) is
//! made at the first update, shaped like the parameters; updating
//! parameters of a different size later is an [`Error::CoordinateCount`].
//!
//! Settings are checked at construction: a learning rate that is not
//! positive and finite, a momentum or decay outside `[0, 1)`, or a
//! non-positive epsilon is an [`Error::InvalidSetting`].

use crate::cores::over_halves;
use crate::error::{Error, Result};
use crate::learning::schedule::{Schedule, fraction, positive};
use crate::space::{Euclidean, Real, all_finite_slice};

/// A stateful update rule for parameters, given their gradient.
///
/// Implement [`begin_update`](Optimiser::begin_update) (state and step
/// count) and [`step_run`](Optimiser::step_run) (the rule, on one run of
/// coordinates); [`update_in_place`](Optimiser::update_in_place) does the
/// checks and walks the parameters' own memory, so an update copies nothing.
///
/// # Example
///
/// Adam on a tuple of an array and a scalar, minimising
/// `|w - (1, 2)|^2 + (c - 3)^2`:
///
/// ```
/// use revdiff::{Adam, Optimiser};
/// use ndarray::array;
///
/// let mut adam = Adam::new(0.1_f64).unwrap();
/// let mut params = (array![0.0, 0.0], 0.0);
/// for _ in 0..500 {
///     let (w, c) = &params;
///     let gradient = ((w - &array![1.0, 2.0]) * 2.0, 2.0 * (c - 3.0));
///     params = adam.update(&params, &gradient).unwrap();
/// }
/// assert!((params.0[1] - 2.0).abs() < 1e-3 && (params.1 - 3.0).abs() < 1e-3);
/// assert_eq!(adam.steps_taken(), 500);
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` is not an optimiser over `{R}`",
    label = "training needs `Optimiser<{R}>` here",
    note = "the optimisers are `GradientDescent`, `Momentum`, `Nesterov`, `Adagrad`, `RmsProp` and `Adam`; pass one by `&mut`, with the same float type as the data"
)]
pub trait Optimiser<R: Real> {
    /// Starts an update of `dimension` coordinates: makes the state on first
    /// use, checks its size after that, and counts the step. Called once per
    /// update, before [`step_run`](Optimiser::step_run).
    fn begin_update(&mut self, dimension: usize) -> Result<()>;

    /// Moves one run of coordinates in place, given their gradient; `offset`
    /// is the flat position of the run's first coordinate, which locates its
    /// state. Runs of one update never overlap.
    fn step_run(&mut self, offset: usize, params: &mut [R], gradient: &[R]);

    /// Number of updates made so far.
    fn steps_taken(&self) -> usize;

    /// Forgets the state and the step count, as if newly made.
    fn reset(&mut self);

    /// Moves flat `params` in place, given the gradient at them (same length).
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
        if params.len() != gradient.len() {
            return Err(Error::CoordinateCount {
                operation: "optimiser step (gradient against parameters)",
                expected: params.len(),
                found: gradient.len(),
            });
        }
        self.begin_update(params.len())?;
        self.step_run(0, params, gradient);
        Ok(())
    }

    /// Updates `params` in place with `gradient`, with no copies: the
    /// optimiser walks both values' memory together
    /// ([`Euclidean::zip_runs_mut`]). Returns an error, with parameters and
    /// state unchanged, if the gradient is shaped differently from the
    /// parameters or is not finite.
    fn update_in_place<P: Euclidean<R>>(&mut self, params: &mut P, gradient: &P) -> Result<()>
    where
        Self: Sized,
    {
        let n = params.dimension();
        if gradient.dimension() != n {
            return Err(Error::CoordinateCount {
                operation: "optimiser update (gradient against parameters)",
                expected: n,
                found: gradient.dimension(),
            });
        }
        if !gradient.all_finite() {
            let coords = gradient.coordinates();
            let i = coords.iter().position(|g| !g.is_finite()).unwrap_or(0);
            return Err(Error::NonFinite {
                operation: "optimiser update",
                detail: format!("{} at gradient coordinate {i}", coords[i]),
            });
        }
        step_finite(self, params, gradient).map(|_| ())
    }

    /// The parameters after one update with `gradient`, as a new value;
    /// see [`update_in_place`](Optimiser::update_in_place).
    fn update<P: Euclidean<R>>(&mut self, params: &P, gradient: &P) -> Result<P>
    where
        Self: Sized,
    {
        let mut next = params.clone();
        self.update_in_place(&mut next, gradient)?;
        Ok(next)
    }
}

/// [`Optimiser::update_in_place`] for a gradient already known to be
/// finite and of the parameters' dimension (the training loop checks both
/// itself): checks the shapes part by part, then steps. Returns whether
/// every updated parameter is finite, checked run by run while the run is
/// still in cache rather than in a second pass.
pub(crate) fn step_finite<R: Real, O: Optimiser<R>, P: Euclidean<R>>(
    optimiser: &mut O,
    params: &mut P,
    gradient: &P,
) -> Result<bool> {
    // Shapes are checked before the step is counted.
    params.zip_runs_mut(gradient, 0, &mut |_, _, _| {})?;
    optimiser.begin_update(params.dimension())?;
    let mut finite = true;
    params.zip_runs_mut(gradient, 0, &mut |at, p, g| {
        optimiser.step_run(at, p, g);
        finite &= all_finite_slice(p);
    })?;
    Ok(finite)
}

/// State vectors of one length, made at the first update, and the rate and
/// step number of the update in progress.
#[derive(Clone, Debug, PartialEq)]
struct State<R, const K: usize> {
    vectors: [Vec<R>; K],
    steps: usize,
    rate: R,
}

impl<R: Real, const K: usize> State<R, K> {
    fn new() -> Self {
        State {
            vectors: std::array::from_fn(|_| Vec::new()),
            steps: 0,
            rate: R::zero(),
        }
    }

    /// Makes the state on first use, checks its length after that, counts
    /// the step and sets its rate.
    fn begin(&mut self, schedule: &Schedule<R>, dimension: usize) -> Result<()> {
        if self.steps == 0 {
            for v in &mut self.vectors {
                *v = vec![R::zero(); dimension];
            }
        } else if K > 0 && self.vectors[0].len() != dimension {
            return Err(Error::CoordinateCount {
                operation: "optimiser step (parameters against the optimiser's state)",
                expected: self.vectors[0].len(),
                found: dimension,
            });
        }
        self.rate = schedule.rate_at(self.steps);
        self.steps += 1;
        Ok(())
    }

    /// State vector `k` over the run at `offset` of length `len`.
    fn run(&mut self, k: usize, offset: usize, len: usize) -> &mut [R] {
        &mut self.vectors[k][offset..offset + len]
    }
}

macro_rules! bookkeeping {
    () => {
        fn begin_update(&mut self, dimension: usize) -> Result<()> {
            self.state.begin(&self.schedule, dimension)
        }
        fn steps_taken(&self) -> usize {
            self.state.steps
        }
        fn reset(&mut self) {
            self.state = State::new();
        }
    };
}

macro_rules! with_schedule {
    () => {
        /// Replaces the learning rate by a schedule.
        pub fn with_schedule(mut self, schedule: Schedule<R>) -> Self {
            self.schedule = schedule;
            self
        }
    };
}

macro_rules! with_epsilon_and_schedule {
    () => {
        /// Sets the term added to the root in the denominator (positive).
        pub fn with_epsilon(mut self, epsilon: R) -> Result<Self> {
            positive("epsilon", epsilon)?;
            self.epsilon = epsilon;
            Ok(self)
        }
        with_schedule!();
    };
}

/// Per coordinate: `s <- next(s, g)`, then `p <- p - rate g / (sqrt(s) + eps)`.
fn root_scaled_step<R: Real>(
    params: &mut [R],
    gradient: &[R],
    squares: &mut [R],
    (rate, epsilon): (R, R),
    next: impl Fn(R, R) -> R,
) {
    crate::vectors::widest_for(params.len(), || {
        for ((p, g), s) in params.iter_mut().zip(gradient).zip(squares.iter_mut()) {
            *s = next(*s, *g);
            *p = *p - rate * *g / (s.sqrt() + epsilon);
        }
    })
}

/// Plain gradient descent: `p <- p - lr g`.
///
/// ```
/// use revdiff::{GradientDescent, Optimiser};
/// let mut descent = GradientDescent::new(0.5_f64).unwrap();
/// assert_eq!(descent.update(&1.0, &4.0).unwrap(), -1.0);
/// assert!(GradientDescent::new(-0.5_f64).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct GradientDescent<R> {
    schedule: Schedule<R>,
    state: State<R, 0>,
}

impl<R: Real> GradientDescent<R> {
    /// Gradient descent with a constant learning rate.
    pub fn new(learning_rate: R) -> Result<Self> {
        Ok(GradientDescent {
            schedule: Schedule::constant(learning_rate)?,
            state: State::new(),
        })
    }
    with_schedule!();
}

impl<R: Real> Optimiser<R> for GradientDescent<R> {
    fn step_run(&mut self, _: usize, params: &mut [R], gradient: &[R]) {
        let rate = self.state.rate;
        crate::vectors::widest_for(params.len(), || {
            for (p, g) in params.iter_mut().zip(gradient) {
                *p = *p - rate * *g;
            }
        })
    }
    bookkeeping!();
}

/// Gradient descent with momentum (Polyak, 1964, the heavy-ball method):
/// `v <- mu v + g`, `p <- p - lr v`.
///
/// ```
/// use revdiff::{Momentum, Optimiser};
/// let mut heavy = Momentum::new(0.1_f64, 0.9).unwrap();
/// let p = heavy.update(&0.0, &1.0).unwrap(); // v = 1
/// let p = heavy.update(&p, &1.0).unwrap(); // v = 1.9
/// assert!((p + 0.29).abs() < 1e-15);
/// assert!(Momentum::new(0.1_f64, 1.0).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Momentum<R> {
    velocity: Velocity<R>,
}

/// Nesterov's accelerated gradient (Nesterov, 1983), in the form that needs
/// the gradient at the current parameters only (Sutskever, Martens, Dahl and
/// Hinton, 2013): `v <- mu v + g`, `p <- p - lr (g + mu v)`.
///
/// ```
/// use revdiff::{Nesterov, Optimiser};
/// let mut ahead = Nesterov::new(0.1_f64, 0.9).unwrap();
/// // v = 1, step = 0.1 (1 + 0.9)
/// assert!((ahead.update(&0.0, &1.0).unwrap() + 0.19).abs() < 1e-15);
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Nesterov<R> {
    velocity: Velocity<R>,
}

/// The state and settings the two momentum rules share.
#[derive(Clone, Debug, PartialEq)]
struct Velocity<R> {
    schedule: Schedule<R>,
    momentum: R,
    state: State<R, 1>,
}

impl<R: Real> Velocity<R> {
    fn new(learning_rate: R, momentum: R) -> Result<Self> {
        fraction("momentum", momentum)?;
        Ok(Velocity {
            schedule: Schedule::constant(learning_rate)?,
            momentum,
            state: State::new(),
        })
    }

    /// `v <- mu v + g`, then a step along `v` or, looking ahead, along `g + mu v`.
    fn step(&mut self, offset: usize, params: &mut [R], gradient: &[R], look_ahead: bool) {
        let (rate, mu) = (self.state.rate, self.momentum);
        let v = self.state.run(0, offset, params.len());
        crate::vectors::widest_for(params.len(), || {
            for ((p, g), v) in params.iter_mut().zip(gradient).zip(v.iter_mut()) {
                *v = mu * *v + *g;
                let direction = if look_ahead { *g + mu * *v } else { *v };
                *p = *p - rate * direction;
            }
        })
    }
}

macro_rules! momentum_rule {
    ($ty:ident, $look_ahead:expr) => {
        impl<R: Real> $ty<R> {
            /// Momentum `mu` in `[0, 1)` with a constant learning rate.
            pub fn new(learning_rate: R, momentum: R) -> Result<Self> {
                Ok($ty {
                    velocity: Velocity::new(learning_rate, momentum)?,
                })
            }
            /// Replaces the learning rate by a schedule.
            pub fn with_schedule(mut self, schedule: Schedule<R>) -> Self {
                self.velocity.schedule = schedule;
                self
            }
        }

        impl<R: Real> Optimiser<R> for $ty<R> {
            fn begin_update(&mut self, dimension: usize) -> Result<()> {
                let v = &mut self.velocity;
                v.state.begin(&v.schedule, dimension)
            }
            fn step_run(&mut self, offset: usize, params: &mut [R], gradient: &[R]) {
                self.velocity.step(offset, params, gradient, $look_ahead)
            }
            fn steps_taken(&self) -> usize {
                self.velocity.state.steps
            }
            fn reset(&mut self) {
                self.velocity.state = State::new();
            }
        }
    };
}

momentum_rule!(Momentum, false);
momentum_rule!(Nesterov, true);

/// Adagrad (Duchi, Hazan and Singer, 2011): `s <- s + g^2`,
/// `p <- p - lr g / (sqrt(s) + eps)`; each coordinate's step shrinks with
/// its own accumulated gradient. Default `eps = 1e-8`.
///
/// ```
/// use revdiff::{Adagrad, Optimiser};
/// let mut adagrad = Adagrad::new(0.5_f64).unwrap();
/// let p = adagrad.update(&0.0, &2.0).unwrap();
/// assert!((p + 0.5).abs() < 1e-8); // 0.5 * 2 / sqrt(4)
/// assert!(Adagrad::new(0.5_f64).unwrap().with_epsilon(0.0).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Adagrad<R> {
    schedule: Schedule<R>,
    epsilon: R,
    state: State<R, 1>,
}

impl<R: Real> Adagrad<R> {
    /// Adagrad with a constant learning rate.
    pub fn new(learning_rate: R) -> Result<Self> {
        Ok(Adagrad {
            schedule: Schedule::constant(learning_rate)?,
            epsilon: small(),
            state: State::new(),
        })
    }
    with_epsilon_and_schedule!();
}

impl<R: Real> Optimiser<R> for Adagrad<R> {
    fn step_run(&mut self, offset: usize, params: &mut [R], gradient: &[R]) {
        let (rate, epsilon) = (self.state.rate, self.epsilon);
        let s = self.state.run(0, offset, params.len());
        root_scaled_step(params, gradient, s, (rate, epsilon), |s, g| s + g * g);
    }
    bookkeeping!();
}

/// RMSProp (Tieleman and Hinton, 2012, lecture 6.5 of a course on neural
/// networks): `s <- rho s + (1 - rho) g^2`, `p <- p - lr g / (sqrt(s) + eps)`.
/// Defaults `rho = 0.9`, `eps = 1e-8`.
///
/// ```
/// use revdiff::{Optimiser, RmsProp};
/// let mut rms = RmsProp::new(0.01_f64).unwrap().with_decay(0.99).unwrap();
/// let p = rms.update(&0.0, &3.0).unwrap(); // s = 0.09, step = 0.01 * 3 / 0.3
/// assert!((p + 0.1).abs() < 1e-8);
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct RmsProp<R> {
    schedule: Schedule<R>,
    decay: R,
    epsilon: R,
    state: State<R, 1>,
}

impl<R: Real> RmsProp<R> {
    /// RMSProp with a constant learning rate.
    pub fn new(learning_rate: R) -> Result<Self> {
        Ok(RmsProp {
            schedule: Schedule::constant(learning_rate)?,
            decay: R::from(0.9).expect("0.9 fits every real type"),
            epsilon: small(),
            state: State::new(),
        })
    }
    /// Sets the decay `rho` of the running mean of squares, in `[0, 1)`.
    pub fn with_decay(mut self, decay: R) -> Result<Self> {
        fraction("rmsprop decay", decay)?;
        self.decay = decay;
        Ok(self)
    }
    with_epsilon_and_schedule!();
}

impl<R: Real> Optimiser<R> for RmsProp<R> {
    fn step_run(&mut self, offset: usize, params: &mut [R], gradient: &[R]) {
        let (rate, epsilon, keep) = (self.state.rate, self.epsilon, self.decay);
        let s = self.state.run(0, offset, params.len());
        root_scaled_step(params, gradient, s, (rate, epsilon), |s, g| {
            keep * s + (R::one() - keep) * g * g
        });
    }
    bookkeeping!();
}

/// Adam (Kingma and Ba, 2015, Algorithm 1): running means of the gradient
/// and of its square, bias-corrected, `p <- p - lr m^ / (sqrt(v^) + eps)`.
/// Defaults from the paper: `beta1 = 0.9`, `beta2 = 0.999`, `eps = 1e-8`.
///
/// With bias correction the first step of each coordinate is
/// `lr |g| / (|g| + eps)`, about the learning rate whatever the gradient's size.
///
/// ```
/// use revdiff::{Adam, Optimiser};
/// let mut adam = Adam::new(0.01_f64).unwrap();
/// let p = adam.update(&1.0, &250.0).unwrap();
/// assert!((p - (1.0 - 0.01)).abs() < 1e-12);
/// assert!(Adam::new(0.01_f64).unwrap().with_betas(0.9, 1.0).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Adam<R> {
    schedule: Schedule<R>,
    beta1: R,
    beta2: R,
    epsilon: R,
    state: State<R, 2>,
    /// The step's `rate / (1 - beta1^t)` and `1 / sqrt(1 - beta2^t)`, set
    /// by `begin_update`: once per step, not once per run of coordinates
    /// (`powi` of `f32` is a software loop, 3 % of a small network's step).
    scales: (R, R),
}

impl<R: Real> Adam<R> {
    /// Adam with a constant learning rate and the paper's other settings.
    pub fn new(learning_rate: R) -> Result<Self> {
        Ok(Adam {
            schedule: Schedule::constant(learning_rate)?,
            beta1: R::from(0.9).expect("0.9 fits every real type"),
            beta2: R::from(0.999).expect("0.999 fits every real type"),
            epsilon: small(),
            state: State::new(),
            scales: (R::zero(), R::one()),
        })
    }
    /// Sets the decay rates of the two running means, each in `[0, 1)`.
    pub fn with_betas(mut self, beta1: R, beta2: R) -> Result<Self> {
        fraction("beta1", beta1)?;
        fraction("beta2", beta2)?;
        self.beta1 = beta1;
        self.beta2 = beta2;
        Ok(self)
    }
    with_epsilon_and_schedule!();
}

impl<R: Real> Optimiser<R> for Adam<R> {
    fn begin_update(&mut self, dimension: usize) -> Result<()> {
        self.state.begin(&self.schedule, dimension)?;
        let t = i32::try_from(self.state.steps).unwrap_or(i32::MAX);
        let correction1 = R::one() - self.beta1.powi(t);
        let correction2 = R::one() - self.beta2.powi(t);
        // rate m̂ / (sqrt(v̂) + ε) with the bias corrections folded into
        // two constants: one division and one square root per coordinate,
        // not three divisions (the update was a tenth of a training step).
        self.scales = (self.state.rate / correction1, R::one() / correction2.sqrt());
        Ok(())
    }
    fn steps_taken(&self) -> usize {
        self.state.steps
    }
    fn reset(&mut self) {
        self.state = State::new();
    }
    fn step_run(&mut self, offset: usize, params: &mut [R], gradient: &[R]) {
        let ((step, root_scale), epsilon) = (self.scales, self.epsilon);
        let (b1, b2) = (self.beta1, self.beta2);
        let len = params.len();
        let [m, v] = &mut self.state.vectors;
        let (m, v) = (&mut m[offset..offset + len], &mut v[offset..offset + len]);
        let (keep1, keep2) = (R::one() - b1, R::one() - b2);
        // Every coordinate on its own: halves on two cores give the same
        // numbers.
        let update = |params: &mut [R], gradient: &[R], m: &mut [R], v: &mut [R]| {
            crate::vectors::widest_for(params.len(), || {
                for (((p, g), m), v) in params
                    .iter_mut()
                    .zip(gradient)
                    .zip(m.iter_mut())
                    .zip(v.iter_mut())
                {
                    *m = b1 * *m + keep1 * *g;
                    *v = b2 * *v + keep2 * *g * *g;
                    *p = *p - step * *m / (v.sqrt() * root_scale + epsilon);
                }
            })
        };
        let halves = ((params, gradient), (m, v));
        over_halves(
            len,
            halves,
            &|((p, g), (m, v))| update(p, g, m, v),
            |(), ()| (),
        );
    }
}

fn small<R: Real>() -> R {
    R::from(1e-8).expect("1e-8 fits every real type")
}
