//! The reaction system: species, their phases and the stoichiometric matrix,
//! with the structural checks done once at construction.

use crate::error::CoreError;
use crate::lp::{maximize, LpOutcome};

/// The mixture a species belongs to. Activities are ideal in both.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Phase {
    /// Ideal-gas mixture: `a = y P / P0`.
    Gas,
    /// Ideal liquid solution: `a = x`.
    Liquid,
}

impl Phase {
    /// Index of the phase in per-phase arrays.
    pub fn index(self) -> usize {
        match self {
            Phase::Gas => 0,
            Phase::Liquid => 1,
        }
    }
}

/// Number of phases the engine knows.
pub const N_PHASES: usize = 2;

/// Relative tolerance for linear dependence of reactions.
const DEPENDENCE_TOL: f64 = 1e-9;

/// A validated reaction system.
#[derive(Clone, Debug)]
pub struct System {
    n_species: usize,
    n_reactions: usize,
    /// `nu[j * n_species + i]`: coefficient of species `i` in reaction `j`,
    /// products positive.
    stoich: Vec<f64>,
    phases: Vec<Phase>,
    /// Standard-state pressure of the equilibrium constants, bar.
    p0: f64,
    /// Species with a non-zero coefficient in some reaction.
    reactive: Vec<bool>,
}

impl System {
    /// Build and check a system: coefficients finite, no empty reaction, the
    /// reactions linearly independent, and no combination of reactions that
    /// consumes nothing (which would make the extents unbounded).
    pub fn new(
        stoich: Vec<f64>,
        n_reactions: usize,
        n_species: usize,
        phases: Vec<Phase>,
        p0: f64,
    ) -> Result<Self, CoreError> {
        if stoich.len() != n_reactions * n_species {
            return Err(CoreError::Shape(format!(
                "stoichiometric matrix has {} entries, expected {n_reactions} x {n_species}",
                stoich.len()
            )));
        }
        if phases.len() != n_species {
            return Err(CoreError::Shape(format!(
                "{} phases given for {n_species} species",
                phases.len()
            )));
        }
        if n_reactions == 0 || n_species == 0 {
            return Err(CoreError::Shape(
                "a system needs at least one species and one reaction".into(),
            ));
        }
        if !(p0 > 0.0 && p0.is_finite()) {
            return Err(CoreError::BadStandardPressure(p0));
        }
        for j in 0..n_reactions {
            let row = &stoich[j * n_species..(j + 1) * n_species];
            if let Some(i) = row.iter().position(|v| !v.is_finite()) {
                return Err(CoreError::NonFiniteCoefficient {
                    reaction: j,
                    species: i,
                });
            }
            if row.iter().all(|&v| v == 0.0) {
                return Err(CoreError::EmptyReaction { reaction: j });
            }
        }
        check_independent(&stoich, n_reactions, n_species)?;
        check_bounded(&stoich, n_reactions, n_species)?;
        let reactive = (0..n_species)
            .map(|i| (0..n_reactions).any(|j| stoich[j * n_species + i] != 0.0))
            .collect();
        Ok(System {
            n_species,
            n_reactions,
            stoich,
            phases,
            p0,
            reactive,
        })
    }

    pub fn n_species(&self) -> usize {
        self.n_species
    }

    pub fn n_reactions(&self) -> usize {
        self.n_reactions
    }

    /// Row-major `R x S` stoichiometric matrix.
    pub fn stoich(&self) -> &[f64] {
        &self.stoich
    }

    pub fn phases(&self) -> &[Phase] {
        &self.phases
    }

    pub fn p0(&self) -> f64 {
        self.p0
    }

    /// Whether species `i` takes part in any reaction (otherwise it is inert).
    pub fn is_reactive(&self, i: usize) -> bool {
        self.reactive[i]
    }
}

/// Modified Gram-Schmidt over the reaction rows in order, tracking each
/// orthonormal vector as a combination of the original rows, so a dependent
/// row can be reported as the combination of earlier rows that produces it.
fn check_independent(stoich: &[f64], r: usize, s: usize) -> Result<(), CoreError> {
    let mut ortho: Vec<Vec<f64>> = Vec::new(); // orthonormal rows
    let mut combos: Vec<Vec<f64>> = Vec::new(); // ortho[k] = sum_l combos[k][l] nu[l]
    for j in 0..r {
        let row = &stoich[j * s..(j + 1) * s];
        let norm0 = row.iter().map(|v| v * v).sum::<f64>().sqrt();
        let mut v = row.to_vec();
        let mut proj = vec![0.0; ortho.len()];
        for (k, q) in ortho.iter().enumerate() {
            let dot: f64 = v.iter().zip(q).map(|(a, b)| a * b).sum();
            proj[k] = dot;
            for (vi, qi) in v.iter_mut().zip(q) {
                *vi -= dot * qi;
            }
        }
        // Second pass of re-orthogonalisation for accuracy.
        for (k, q) in ortho.iter().enumerate() {
            let dot: f64 = v.iter().zip(q).map(|(a, b)| a * b).sum();
            proj[k] += dot;
            for (vi, qi) in v.iter_mut().zip(q) {
                *vi -= dot * qi;
            }
        }
        let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
        if norm <= DEPENDENCE_TOL * norm0 {
            // row_j = sum_k proj[k] ortho[k] = sum_l (sum_k proj[k] combos[k][l]) nu[l]
            let mut coef = vec![0.0; j];
            for (k, c) in combos.iter().enumerate() {
                for (l, cl) in c.iter().enumerate() {
                    coef[l] += proj[k] * cl;
                }
            }
            let combination = coef
                .into_iter()
                .enumerate()
                .filter(|(_, c)| c.abs() > 1e-9)
                .map(|(l, c)| (l, round_small_rational(c)))
                .collect();
            return Err(CoreError::DependentReaction {
                reaction: j,
                combination,
            });
        }
        // combo for the new orthonormal vector: (e_j - sum_k proj[k] combos[k]) / norm
        let mut combo = vec![0.0; j + 1];
        combo[j] = 1.0;
        for (k, c) in combos.iter().enumerate() {
            for (l, cl) in c.iter().enumerate() {
                combo[l] -= proj[k] * cl;
            }
        }
        for c in combo.iter_mut() {
            *c /= norm;
        }
        for vi in v.iter_mut() {
            *vi /= norm;
        }
        ortho.push(v);
        combos.push(combo);
    }
    Ok(())
}

/// Snap a coefficient to a nearby simple fraction (denominator up to 12) for
/// readable messages; leave it as is otherwise.
fn round_small_rational(c: f64) -> f64 {
    for den in 1..=12 {
        let num = (c * den as f64).round();
        if (num / den as f64 - c).abs() < 1e-9 * c.abs().max(1.0) {
            return num / den as f64;
        }
    }
    c
}

/// The extents are bounded for every feed unless some direction `d` has
/// `nu^T d >= 0` for every species (it consumes nothing). Find one with a
/// linear programme over `d = p - q`, `0 <= p, q <= 1`, maximising the total
/// production; any positive optimum is such a direction.
fn check_bounded(stoich: &[f64], r: usize, s: usize) -> Result<(), CoreError> {
    let n_var = 2 * r;
    let m = s + 2 * r;
    let mut a = vec![0.0; m * n_var];
    for i in 0..s {
        for j in 0..r {
            // -(nu^T d)_i <= 0
            a[i * n_var + j] = -stoich[j * s + i];
            a[i * n_var + r + j] = stoich[j * s + i];
        }
    }
    for k in 0..2 * r {
        a[(s + k) * n_var + k] = 1.0;
    }
    let mut b = vec![0.0; m];
    for v in b[s..].iter_mut() {
        *v = 1.0;
    }
    let mut c = vec![0.0; n_var];
    for j in 0..r {
        let total: f64 = stoich[j * s..(j + 1) * s].iter().sum();
        c[j] = total;
        c[r + j] = -total;
    }
    match maximize(&a, &b, &c, m, n_var) {
        LpOutcome::Optimal { x, value } if value > 1e-9 => {
            let combination = (0..r)
                .map(|j| (j, x[j] - x[r + j]))
                .filter(|(_, w)| w.abs() > 1e-9)
                .collect();
            Err(CoreError::UnboundedReactions { combination })
        }
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gas(n: usize) -> Vec<Phase> {
        vec![Phase::Gas; n]
    }

    #[test]
    fn accepts_reforming_and_shift() {
        // CH4 H2O CO H2 CO2
        let nu = vec![-1.0, -1.0, 1.0, 3.0, 0.0, 0.0, -1.0, -1.0, 1.0, 1.0];
        let sys = System::new(nu, 2, 5, gas(5), 1.0).unwrap();
        assert!(sys.is_reactive(0) && sys.is_reactive(4));
    }

    #[test]
    fn names_the_dependent_reaction_and_its_combination() {
        // r3 = r1 + r2 (reforming + shift = CH4 + 2 H2O = CO2 + 4 H2)
        let nu = vec![
            -1.0, -1.0, 1.0, 3.0, 0.0, //
            0.0, -1.0, -1.0, 1.0, 1.0, //
            -1.0, -2.0, 0.0, 4.0, 1.0,
        ];
        match System::new(nu, 3, 5, gas(5), 1.0) {
            Err(CoreError::DependentReaction {
                reaction,
                combination,
            }) => {
                assert_eq!(reaction, 2);
                assert_eq!(combination, vec![(0, 1.0), (1, 1.0)]);
            }
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn doubled_reaction_is_dependent() {
        let nu = vec![-1.0, 1.0, -2.0, 2.0];
        match System::new(nu, 2, 2, gas(2), 1.0) {
            Err(CoreError::DependentReaction { combination, .. }) => {
                assert_eq!(combination, vec![(0, 2.0)])
            }
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn reaction_consuming_nothing_is_unbounded() {
        // A = B is fine; "= C" consumes nothing.
        let nu = vec![-1.0, 1.0, 0.0, 0.0, 0.0, 1.0];
        assert!(matches!(
            System::new(nu, 2, 3, gas(3), 1.0),
            Err(CoreError::UnboundedReactions { .. })
        ));
    }

    #[test]
    fn rejects_bad_standard_pressure_and_empty_rows() {
        assert!(matches!(
            System::new(vec![-1.0, 1.0], 1, 2, gas(2), 0.0),
            Err(CoreError::BadStandardPressure(_))
        ));
        assert!(matches!(
            System::new(vec![0.0, 0.0], 1, 2, gas(2), 1.0),
            Err(CoreError::EmptyReaction { reaction: 0 })
        ));
    }
}
