//! Learning-rate schedules: the step size as a function of the step count.

use crate::error::{Error, Result};
use crate::space::Real;

/// A learning rate that may change with the number of steps taken.
///
/// Every constructor checks its settings and returns
/// [`Error::InvalidSetting`] naming the one that is out of range. Steps count
/// from 0: `rate_at(0)` is the rate of the first update.
///
/// ```
/// use revdiff::Schedule;
/// let constant = Schedule::constant(0.1_f64).unwrap();
/// assert_eq!(constant.rate_at(1000), 0.1);
/// // Halved every 10 steps.
/// let step = Schedule::step_decay(0.1_f64, 0.5, 10).unwrap();
/// assert_eq!((step.rate_at(9), step.rate_at(10), step.rate_at(25)), (0.1, 0.05, 0.025));
/// // From 0.1 down to 0.001 along half a cosine over 100 steps, then held.
/// let cosine = Schedule::cosine(0.1_f64, 0.001, 100).unwrap();
/// assert!((cosine.rate_at(50) - 0.0505).abs() < 1e-12);
/// assert_eq!(cosine.rate_at(500), 0.001);
/// assert!(Schedule::constant(-0.1_f64).is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Schedule<R> {
    kind: Kind<R>,
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Kind<R> {
    Constant(R),
    StepDecay { initial: R, factor: R, every: usize },
    Exponential { initial: R, factor: R },
    Cosine { initial: R, last: R, steps: usize },
}

pub(crate) fn positive(name: &'static str, value: impl Real) -> Result<()> {
    if value > num_traits::zero() && value.is_finite() {
        Ok(())
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: "must be positive and finite",
        })
    }
}

/// `value` in `[0, 1)`.
pub(crate) fn fraction(name: &'static str, value: impl Real) -> Result<()> {
    if value >= num_traits::zero() && value < num_traits::one() {
        Ok(())
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: "must be in [0, 1)",
        })
    }
}

fn decay_factor(name: &'static str, value: impl Real) -> Result<()> {
    if value > num_traits::zero() && value <= num_traits::one() {
        Ok(())
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: "must be in (0, 1]",
        })
    }
}

fn at_least_one(name: &'static str, value: usize) -> Result<()> {
    if value >= 1 {
        Ok(())
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: "must be at least 1",
        })
    }
}

impl<R: Real> Schedule<R> {
    /// The same rate at every step; it must be positive and finite.
    pub fn constant(rate: R) -> Result<Self> {
        positive("learning rate", rate)?;
        Ok(Schedule {
            kind: Kind::Constant(rate),
        })
    }

    /// `initial * factor^(step / every)` with integer division: the rate is
    /// multiplied by `factor` (in `(0, 1]`) every `every` steps.
    pub fn step_decay(initial: R, factor: R, every: usize) -> Result<Self> {
        positive("learning rate", initial)?;
        decay_factor("step decay factor", factor)?;
        at_least_one("steps between decays", every)?;
        Ok(Schedule {
            kind: Kind::StepDecay {
                initial,
                factor,
                every,
            },
        })
    }

    /// `initial * factor^step`, with `factor` in `(0, 1]`.
    pub fn exponential(initial: R, factor: R) -> Result<Self> {
        positive("learning rate", initial)?;
        decay_factor("exponential decay factor", factor)?;
        Ok(Schedule {
            kind: Kind::Exponential { initial, factor },
        })
    }

    /// From `initial` down to `last` along half a cosine over `steps` steps,
    /// then `last` from there on; `last` must be in `[0, initial]`.
    pub fn cosine(initial: R, last: R, steps: usize) -> Result<Self> {
        positive("learning rate", initial)?;
        if !(last >= R::zero() && last <= initial) {
            return Err(Error::InvalidSetting {
                name: "final learning rate",
                value: last.to_string(),
                reason: "must be in [0, initial learning rate]",
            });
        }
        at_least_one("cosine schedule length", steps)?;
        Ok(Schedule {
            kind: Kind::Cosine {
                initial,
                last,
                steps,
            },
        })
    }

    /// The rate for the update after `step` earlier updates.
    pub fn rate_at(&self, step: usize) -> R {
        let count = |n: usize| R::from(n).unwrap_or_else(R::max_value);
        match self.kind {
            Kind::Constant(rate) => rate,
            Kind::StepDecay {
                initial,
                factor,
                every,
            } => initial * factor.powi(i32::try_from(step / every).unwrap_or(i32::MAX)),
            Kind::Exponential { initial, factor } => initial * factor.powf(count(step)),
            Kind::Cosine {
                initial,
                last,
                steps,
            } => {
                let progress = count(step.min(steps)) / count(steps);
                let pi = R::from(std::f64::consts::PI).expect("pi fits every real type");
                let half: R = R::from(0.5).expect("one half fits every real type");
                last + (initial - last) * half * (R::one() + (pi * progress).cos())
            }
        }
    }
}
