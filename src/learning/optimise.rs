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

use crate::error::{Error, Result};
use crate::learning::schedule::{Schedule, fraction, positive};
use crate::space::{Euclidean, Real};

/// A stateful update rule for parameters, given their gradient.
///
/// Implement [`Optimiser::step_coordinates`]; [`Optimiser::update`] does the
/// flattening, the checks and the rebuilding.
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
    /// Moves `params` in place, given the gradient at them (same length).
    /// Implementations count the step.
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()>;

    /// Number of updates made so far.
    fn steps_taken(&self) -> usize;

    /// Forgets the state and the step count, as if newly made.
    fn reset(&mut self);

    /// The parameters after one update with `gradient`. Returns an error,
    /// with the state unchanged, if the gradient is shaped differently from
    /// the parameters or is not finite.
    fn update<P: Euclidean<R>>(&mut self, params: &P, gradient: &P) -> Result<P>
    where
        Self: Sized,
    {
        let mut coords = params.coordinates();
        let grad = gradient.coordinates();
        if grad.len() != coords.len() {
            return Err(Error::CoordinateCount {
                operation: "optimiser update (gradient against parameters)",
                expected: coords.len(),
                found: grad.len(),
            });
        }
        if let Some(i) = grad.iter().position(|g| !g.is_finite()) {
            return Err(Error::NonFinite {
                operation: "optimiser update",
                detail: format!("{} at gradient coordinate {i}", grad[i]),
            });
        }
        self.step_coordinates(&mut coords, &grad)?;
        params.rebuild_from_coordinates(&coords)
    }
}

/// State vectors of one length, made at the first update.
#[derive(Clone, Debug, PartialEq)]
struct State<R, const K: usize> {
    vectors: [Vec<R>; K],
    steps: usize,
}

impl<R: Real, const K: usize> State<R, K> {
    fn new() -> Self {
        State {
            vectors: std::array::from_fn(|_| Vec::new()),
            steps: 0,
        }
    }

    /// Makes the state on first use and checks lengths; returns the rate of
    /// this step and the 1-based step number.
    fn begin(
        &mut self,
        schedule: &Schedule<R>,
        params: &[R],
        gradient: &[R],
    ) -> Result<(R, usize)> {
        if params.len() != gradient.len() {
            return Err(Error::CoordinateCount {
                operation: "optimiser step (gradient against parameters)",
                expected: params.len(),
                found: gradient.len(),
            });
        }
        if self.steps == 0 {
            for v in &mut self.vectors {
                *v = vec![R::zero(); params.len()];
            }
        } else if K > 0 && self.vectors[0].len() != params.len() {
            return Err(Error::CoordinateCount {
                operation: "optimiser step (parameters against the optimiser's state)",
                expected: self.vectors[0].len(),
                found: params.len(),
            });
        }
        let rate = schedule.rate_at(self.steps);
        self.steps += 1;
        Ok((rate, self.steps))
    }
}

macro_rules! bookkeeping {
    () => {
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
    for ((p, g), s) in params.iter_mut().zip(gradient).zip(squares.iter_mut()) {
        *s = next(*s, *g);
        *p = *p - rate * *g / (s.sqrt() + epsilon);
    }
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
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
        let (rate, _) = self.state.begin(&self.schedule, params, gradient)?;
        for (p, g) in params.iter_mut().zip(gradient) {
            *p = *p - rate * *g;
        }
        Ok(())
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
    fn step(&mut self, params: &mut [R], gradient: &[R], look_ahead: bool) -> Result<()> {
        let (rate, _) = self.state.begin(&self.schedule, params, gradient)?;
        let mu = self.momentum;
        let [v] = &mut self.state.vectors;
        for ((p, g), v) in params.iter_mut().zip(gradient).zip(v.iter_mut()) {
            *v = mu * *v + *g;
            let direction = if look_ahead { *g + mu * *v } else { *v };
            *p = *p - rate * direction;
        }
        Ok(())
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
            fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
                self.velocity.step(params, gradient, $look_ahead)
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
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
        let (rate, _) = self.state.begin(&self.schedule, params, gradient)?;
        let [s] = &mut self.state.vectors;
        root_scaled_step(params, gradient, s, (rate, self.epsilon), |s, g| s + g * g);
        Ok(())
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
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
        let (rate, _) = self.state.begin(&self.schedule, params, gradient)?;
        let [s] = &mut self.state.vectors;
        let keep = self.decay;
        root_scaled_step(params, gradient, s, (rate, self.epsilon), |s, g| {
            keep * s + (R::one() - keep) * g * g
        });
        Ok(())
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
    fn step_coordinates(&mut self, params: &mut [R], gradient: &[R]) -> Result<()> {
        let (rate, t) = self.state.begin(&self.schedule, params, gradient)?;
        let t = i32::try_from(t).unwrap_or(i32::MAX);
        let (b1, b2) = (self.beta1, self.beta2);
        let correction1 = R::one() - b1.powi(t);
        let correction2 = R::one() - b2.powi(t);
        let [m, v] = &mut self.state.vectors;
        for (((p, g), m), v) in params
            .iter_mut()
            .zip(gradient)
            .zip(m.iter_mut())
            .zip(v.iter_mut())
        {
            *m = b1 * *m + (R::one() - b1) * *g;
            *v = b2 * *v + (R::one() - b2) * *g * *g;
            let m_hat = *m / correction1;
            let v_hat = *v / correction2;
            *p = *p - rate * m_hat / (v_hat.sqrt() + self.epsilon);
        }
        Ok(())
    }
    bookkeeping!();
}

fn small<R: Real>() -> R {
    R::from(1e-8).expect("1e-8 fits every real type")
}
