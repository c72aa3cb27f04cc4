//! Bounds on the nonlinear parameters of every learning-curve family, so that a fitted curve
//! keeps a shape a learning curve can have over the range of n that matters (from a tenth of
//! the smallest measured size to a thousand times the largest): no step functions, no
//! overflow, monotone in n.
//!
//! Every family is written as `offset + θ·ψ(n; ν)` with θ ≥ 0 (see [`super::families`]); the
//! parameters ν that enter nonlinearly are bounded here, the linear ones follow from them by
//! least squares. Two kinds of ν:
//!
//! | kind | parameters | default bounds | why |
//! |---|---|---|---|
//! | steepness exponent | power-law exponent b (a·n^b); decay exponent b of the saturating and shifted power laws; Morgan–Mercer–Flodin and Weibull shape d | [0.02, 2] | see below |
//! | location | exponential scale n0; MMF half-rise size b^(1/d); Weibull scale a^(−1/d); shift d | [n_min/100, 100·n_max] | see below |
//!
//! **Steepness.** Each exponent is a slope on log–log axes: the growth of a power law, the
//! decay of the deficit c − skill of a saturating power law, and the foot of the MMF and
//! Weibull curves (which rise as n^d well below their location). Published learning curves
//! have such exponents between about 0.07 and 0.35 in magnitude (Hestness et al. 2017,
//! generalisation error of deep networks over several domains), and learning theory gives rates
//! n^(−1/2) to n^(−1) for parametric problems (common practice; Viering & Loog 2022 review
//! both). The upper bound 2 leaves room for curves twice as steep as the fastest parametric
//! rate while excluding step functions: with d ≤ 2 an MMF curve needs a factor ≥ 81^(1/2) = 9
//! in n to rise from 10% to 90% of its range, a Weibull curve a factor ≥ 21.9^(1/2) ≈ 4.7,
//! i.e. more than two doublings, so the rise is resolved by sizes spaced by factors of two; an
//! unbounded d lets the curve jump between two measured sizes (a step whose position the data
//! cannot fix). The lower bound 0.02 marks a curve as flat: it changes by less than 1.4% per
//! doubling of n, and a saturating curve with such an exponent is a logarithm in disguise
//! (c − a·n^(−b) ≈ c − a + a·b·ln n as b → 0, with c and a growing without bound), which the
//! logarithmic family describes directly.
//!
//! **Location.** A location more than 100 times below the smallest size means the curve has
//! finished rising before any measurement (a constant over the data); more than 100 times
//! above the largest, it has barely started (the foot of the curve, i.e. a power law or a
//! straight line, which other families describe), and its asymptote is set by nothing in the
//! data. Both ends also keep every power and exponential finite over the range that matters.
//! The factor 100 follows the rule of thumb that a model is not extrapolated more than two
//! decades beyond its data (common practice).
//!
//! A fit whose nonlinear parameter ends at a bound is rejected, with a reason that names the
//! parameter, its bound and what the curve degenerates into there (e.g. "steepness d = 2.0000
//! at its upper bound 2.0000 (a step function)"); bootstrap refits obey the same bounds and
//! the same rule.
//!
//! References: Hestness et al. (2017), "Deep learning scaling is predictable, empirically",
//! arXiv:1712.00409 (exponents −0.07 to −0.35); Viering & Loog (2022), "The shape of learning
//! curves: a review", IEEE TPAMI (power-law, exponential and sigmoidal shapes, monotonicity);
//! Domhan, Springenberg & Hutter (2015), IJCAI (parametric families constrained to increasing
//! curves; from memory).

use serde::{Deserialize, Serialize};

/// The rules from which the bounds of a fit are derived (see the module doc); the defaults
/// are the learning-curve bounds. Wider bounds suit other uses of the engine, e.g. reference
/// data sets whose exponents are not those of learning curves.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct BoundRules {
    /// Smallest steepness exponent.
    pub min_exponent: f64,
    /// Largest steepness exponent.
    pub max_exponent: f64,
    /// Location parameters lie in [n_min / factor, factor · n_max].
    pub location_factor: f64,
}

impl Default for BoundRules {
    fn default() -> Self {
        BoundRules {
            min_exponent: 0.02,
            max_exponent: 2.0,
            location_factor: 100.0,
        }
    }
}

impl BoundRules {
    /// Whether the rules define a non-empty box of positive values.
    pub fn is_valid(&self) -> bool {
        self.min_exponent.is_finite()
            && self.max_exponent.is_finite()
            && self.min_exponent > 0.0
            && self.max_exponent > self.min_exponent
            && self.location_factor.is_finite()
            && self.location_factor >= 1.0
    }
}

/// What a nonlinear parameter measures; decides its bounds and the wording of a rejection.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Kind {
    /// A slope on log–log axes.
    Exponent,
    /// A size in samples.
    Location,
}

/// The bounds of one nonlinear parameter, in the parameter's own units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Bound {
    pub lo: f64,
    pub hi: f64,
}

/// Which end of its range a parameter reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Side {
    Lower,
    Upper,
}

impl Bound {
    pub(crate) fn of(kind: Kind, rules: &BoundRules, n_min: f64, n_max: f64) -> Bound {
        match kind {
            Kind::Exponent => Bound {
                lo: rules.min_exponent,
                hi: rules.max_exponent,
            },
            Kind::Location => Bound {
                lo: n_min / rules.location_factor,
                hi: n_max * rules.location_factor,
            },
        }
    }
}
