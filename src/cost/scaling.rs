//! Reynolds-number scaling of a pilot solver's cost and grid to a target Reynolds number.
//!
//! A quantity q measured at Re_pilot is carried to Re_target as
//! q_target = q_pilot · (Re_target / Re_pilot)^p, with p the law's exponent for that quantity:
//!
//! | law | grid points N | solver steps per model time unit | cost per model time unit |
//! |---|---|---|---|
//! | isotropic turbulence (DNS) | Re_L^(9/4) | Re_L^(3/4) | Re_L^3 |
//! | wall-bounded DNS | Re_Lx^(37/14) | Re_Lx^(37/42) (assumed) | Re_Lx^(74/21) |
//! | wall-resolved LES | Re_Lx^(13/7) | Re_Lx^(13/21) (assumed) | Re_Lx^(52/21) |
//! | wall-modelled LES | Re_Lx^1 | Re_Lx^(1/3) (assumed) | Re_Lx^(4/3) |
//! | custom | user exponent | user exponent (default 0) | sum of the two |
//!
//! Cost per model time unit ∝ (grid points) × (solver steps per model time unit). The model time
//! unit must be an outer-scale time (large-eddy turnover time, flow-through time) held fixed as
//! Re changes; a time unit in viscous or Kolmogorov units would change the step exponent.
//!
//! Isotropic turbulence: grid points ∝ Re_L^(9/4) (N ∝ L/η ∝ Re_L^(3/4) per direction) and
//! steps per large-eddy time ∝ Re_L^(3/4), so cost per time unit ∝ Re_L^3, with
//! Re_L = k^(1/2) L / ν (Pope 2000, *Turbulent Flows*, Cambridge University Press, §9.1;
//! exponents quoted from memory of that section).
//!
//! Wall-bounded flows: grid-point estimates by Choi & Moin 2012 (*Phys. Fluids* 24, 011702),
//! Re_Lx the Reynolds number based on the streamwise extent of the domain: DNS ∝ Re_Lx^(37/14),
//! wall-resolved LES ∝ Re_Lx^(13/7), wall-modelled LES ∝ Re_Lx. Choi & Moin give only the grid
//! count. For the steps this module **assumes** a CFL-limited time step proportional to the
//! grid spacing, with the spacing refined alike in all three directions (Δ ∝ N^(-1/3)), so steps
//! per model time unit ∝ N^(1/3): the step exponent is one third of the grid exponent. Near-wall
//! grids are anisotropic and wall-normal stretching can make the limiting spacing scale
//! differently, so this assumption is printed with the law ([`ScalingLaw::describe`]).
//!
//! References: S. B. Pope (2000), Turbulent Flows, ch. 9; H. Choi & P. Moin (2012), Grid-point
//! requirements for large eddy simulation: Chapman's estimates revisited, Phys. Fluids 24, 011702.

use serde::{Deserialize, Serialize};

/// A law carrying grid size and solver cost from a pilot Reynolds number to a target one.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(
    rename_all = "kebab-case",
    rename_all_fields = "kebab-case",
    tag = "law"
)]
pub enum ScalingLaw {
    /// Homogeneous isotropic turbulence, DNS (Pope 2000, ch. 9); Re = Re_L.
    IsotropicTurbulence,
    /// Wall-bounded flow, DNS (Choi & Moin 2012); Re = Re_Lx.
    WallBoundedDns,
    /// Wall-bounded flow, wall-resolved LES (Choi & Moin 2012); Re = Re_Lx.
    WallResolvedLes,
    /// Wall-bounded flow, wall-modelled LES (Choi & Moin 2012); Re = Re_Lx.
    WallModelledLes,
    /// User-given exponents for grid points and for solver steps per model time unit.
    Custom {
        #[serde(alias = "grid_exponent")]
        grid_exponent: f64,
        #[serde(alias = "step_exponent")]
        step_exponent: f64,
    },
}

impl ScalingLaw {
    /// Names accepted in the study file's `scaling-law` key.
    pub const NAMES: &'static str = "\"isotropic-turbulence\", \"wall-bounded-dns\", \
         \"wall-resolved-les\", \"wall-modelled-les\" or \"custom\" (with grid-exponent)";

    /// Parses a named law; `custom` takes its exponents from the caller.
    pub fn from_name(name: &str, grid_exponent: f64, step_exponent: f64) -> Option<ScalingLaw> {
        Some(match name {
            "isotropic-turbulence" => ScalingLaw::IsotropicTurbulence,
            "wall-bounded-dns" => ScalingLaw::WallBoundedDns,
            "wall-resolved-les" => ScalingLaw::WallResolvedLes,
            "wall-modelled-les" => ScalingLaw::WallModelledLes,
            "custom" => ScalingLaw::Custom {
                grid_exponent,
                step_exponent,
            },
            _ => return None,
        })
    }

    /// Exponent p of grid points N ∝ Re^p.
    pub fn grid_exponent(&self) -> f64 {
        match *self {
            ScalingLaw::IsotropicTurbulence => 9.0 / 4.0,
            ScalingLaw::WallBoundedDns => 37.0 / 14.0,
            ScalingLaw::WallResolvedLes => 13.0 / 7.0,
            ScalingLaw::WallModelledLes => 1.0,
            ScalingLaw::Custom { grid_exponent, .. } => grid_exponent,
        }
    }

    /// Exponent of solver steps per model time unit ∝ Re^p (for the wall-bounded laws, the
    /// assumed CFL scaling: one third of the grid exponent).
    pub fn step_exponent(&self) -> f64 {
        match *self {
            ScalingLaw::IsotropicTurbulence => 3.0 / 4.0,
            ScalingLaw::WallBoundedDns
            | ScalingLaw::WallResolvedLes
            | ScalingLaw::WallModelledLes => self.grid_exponent() / 3.0,
            ScalingLaw::Custom { step_exponent, .. } => step_exponent,
        }
    }

    /// Exponent of cost per model time unit: grid exponent + step exponent.
    pub fn cost_exponent(&self) -> f64 {
        self.grid_exponent() + self.step_exponent()
    }

    /// Short label for tables.
    pub fn label(&self) -> &'static str {
        match self {
            ScalingLaw::IsotropicTurbulence => "isotropic turbulence (DNS)",
            ScalingLaw::WallBoundedDns => "wall-bounded DNS",
            ScalingLaw::WallResolvedLes => "wall-resolved LES",
            ScalingLaw::WallModelledLes => "wall-modelled LES",
            ScalingLaw::Custom { .. } => "custom exponents",
        }
    }

    /// The law, its source and its assumptions, in one paragraph of plain text.
    pub fn describe(&self) -> String {
        match self {
            ScalingLaw::IsotropicTurbulence => "isotropic turbulence (DNS): grid points ∝ Re_L^(9/4), \
                 solver steps per large-eddy time ∝ Re_L^(3/4), so cost per model time unit ∝ Re_L^3 \
                 (Pope 2000, Turbulent Flows, ch. 9). Assumes Re_L = k^(1/2) L/ν, a grid resolving the \
                 Kolmogorov scale at a fixed kmax·η, and a model time unit that is a large-eddy time."
                .to_string(),
            ScalingLaw::WallBoundedDns
            | ScalingLaw::WallResolvedLes
            | ScalingLaw::WallModelledLes => format!(
                "{}: grid points ∝ Re_Lx^({}) (Choi & Moin 2012, Phys. Fluids 24, 011702). \
                 Assumed here, not from that paper: a CFL-limited time step proportional to the \
                 grid spacing, refined alike in all directions, so steps per model time unit ∝ \
                 Re_Lx^({}) and cost per model time unit ∝ Re_Lx^({}). Re_Lx is based on the \
                 streamwise domain length; the model time unit must be an outer (flow-through) time.",
                self.label(),
                match self {
                    ScalingLaw::WallBoundedDns => "37/14",
                    ScalingLaw::WallResolvedLes => "13/7",
                    _ => "1",
                },
                match self {
                    ScalingLaw::WallBoundedDns => "37/42",
                    ScalingLaw::WallResolvedLes => "13/21",
                    _ => "1/3",
                },
                match self {
                    ScalingLaw::WallBoundedDns => "74/21",
                    ScalingLaw::WallResolvedLes => "52/21",
                    _ => "4/3",
                },
            ),
            ScalingLaw::Custom {
                grid_exponent,
                step_exponent,
            } => format!(
                "custom exponents given in the study file: grid points ∝ Re^{grid_exponent}, \
                 solver steps per model time unit ∝ Re^{step_exponent}, so cost per model time \
                 unit ∝ Re^{}; no published source.",
                grid_exponent + step_exponent
            ),
        }
    }

    /// Factor (Re_target / Re_pilot)^p for the given exponent.
    fn factor(exponent: f64, re_pilot: f64, re_target: f64) -> f64 {
        (re_target / re_pilot).powf(exponent)
    }

    /// A pilot cost per model time unit carried to the target Reynolds number.
    pub fn scale_rate(&self, pilot_rate: f64, re_pilot: f64, re_target: f64) -> f64 {
        pilot_rate * Self::factor(self.cost_exponent(), re_pilot, re_target)
    }

    /// A pilot grid-point count carried to the target Reynolds number.
    pub fn scale_grid(&self, pilot_points: f64, re_pilot: f64, re_target: f64) -> f64 {
        pilot_points * Self::factor(self.grid_exponent(), re_pilot, re_target)
    }

    /// A pilot solver time step carried to the target Reynolds number (steps per time unit
    /// grow as Re^step_exponent, so the step shrinks by the inverse factor).
    pub fn scale_time_step(&self, pilot_dt: f64, re_pilot: f64, re_target: f64) -> f64 {
        pilot_dt / Self::factor(self.step_exponent(), re_pilot, re_target)
    }
}

/// A law with the pilot and target Reynolds numbers it was applied between.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ReynoldsScaling {
    pub law: ScalingLaw,
    pub pilot_reynolds: f64,
    pub target_reynolds: f64,
    /// Factor applied to grid points.
    pub grid_factor: f64,
    /// Factor applied to the cost per model time unit.
    pub rate_factor: f64,
}

impl ReynoldsScaling {
    pub fn new(law: ScalingLaw, pilot_reynolds: f64, target_reynolds: f64) -> ReynoldsScaling {
        ReynoldsScaling {
            law,
            pilot_reynolds,
            target_reynolds,
            grid_factor: law.scale_grid(1.0, pilot_reynolds, target_reynolds),
            rate_factor: law.scale_rate(1.0, pilot_reynolds, target_reynolds),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const LAWS: [ScalingLaw; 4] = [
        ScalingLaw::IsotropicTurbulence,
        ScalingLaw::WallBoundedDns,
        ScalingLaw::WallResolvedLes,
        ScalingLaw::WallModelledLes,
    ];

    #[test]
    fn published_exponents() {
        // Pope 2000, ch. 9: N ∝ Re_L^(9/4), steps ∝ Re_L^(3/4), cost ∝ Re_L^3.
        let hit = ScalingLaw::IsotropicTurbulence;
        assert_eq!(hit.grid_exponent(), 2.25);
        assert_eq!(hit.step_exponent(), 0.75);
        assert_eq!(hit.cost_exponent(), 3.0);
        // Choi & Moin 2012: DNS 37/14, wall-resolved LES 13/7, wall-modelled LES 1.
        assert_eq!(ScalingLaw::WallBoundedDns.grid_exponent(), 37.0 / 14.0);
        assert_eq!(ScalingLaw::WallResolvedLes.grid_exponent(), 13.0 / 7.0);
        assert_eq!(ScalingLaw::WallModelledLes.grid_exponent(), 1.0);
        // Assumed CFL steps: one third of the grid exponent, total 4/3 of it.
        for law in LAWS[1..].iter() {
            let g = law.grid_exponent();
            assert!((law.cost_exponent() - 4.0 / 3.0 * g).abs() < 1e-15);
        }
        let custom = ScalingLaw::Custom {
            grid_exponent: 2.0,
            step_exponent: 0.5,
        };
        assert_eq!(custom.cost_exponent(), 2.5);
    }

    #[test]
    fn scaling_reproduces_the_exponents() {
        // Doubling Re_L multiplies HIT grid points by 2^(9/4) (Pope 2000, ch. 9), cost by 2^3.
        let hit = ScalingLaw::IsotropicTurbulence;
        let g = hit.scale_grid(1.0e6, 1000.0, 2000.0);
        assert!((g / 1.0e6 - 2f64.powf(2.25)).abs() < 1e-12);
        assert!((hit.scale_rate(10.0, 1000.0, 2000.0) - 80.0).abs() < 1e-12);
        assert!((hit.scale_time_step(0.01, 1000.0, 2000.0) - 0.01 / 2f64.powf(0.75)).abs() < 1e-15);
        // The exponent recovered from two points equals the law's, for every law.
        for law in LAWS {
            for (re0, re1) in [(3.0e3, 4.5e4), (1.0e5, 1.0e7)] {
                let p = (law.scale_grid(7.0, re0, re1) / 7.0).ln() / (re1 / re0).ln();
                assert!((p - law.grid_exponent()).abs() < 1e-12, "{law:?}");
                let q = (law.scale_rate(7.0, re0, re1) / 7.0).ln() / (re1 / re0).ln();
                assert!((q - law.cost_exponent()).abs() < 1e-12, "{law:?}");
            }
            assert_eq!(law.scale_rate(5.0, 1e4, 1e4), 5.0);
        }
    }

    #[test]
    fn descriptions_cite_sources_and_assumptions() {
        assert!(ScalingLaw::IsotropicTurbulence
            .describe()
            .contains("Pope 2000"));
        for law in &LAWS[1..] {
            let d = law.describe();
            assert!(
                d.contains("Choi & Moin 2012") && d.contains("Assumed"),
                "{d}"
            );
        }
        assert!(ScalingLaw::WallBoundedDns.describe().contains("37/14"));
    }
}
