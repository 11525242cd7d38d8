//! Activity coefficients of a liquid solution phase.
//!
//! * NRTL (Renon and Prausnitz, AIChE J. 14, 1968): `tau_ij = a_ij + b_ij / T`,
//!   `G_ij = exp(-alpha_ij tau_ij)`,
//!   `ln gamma_i = C_i / S_i + sum_j x_j G_ij / S_j (tau_ij - C_j / S_j)` with
//!   `S_j = sum_k x_k G_kj` and `C_j = sum_k x_k tau_kj G_kj`;
//! * Wilson (J. Am. Chem. Soc. 86, 1964): `ln Lambda_ij = a_ij + b_ij / T`,
//!   `ln gamma_i = 1 - ln sum_j x_j Lambda_ij - sum_k x_k Lambda_ki / sum_j x_j Lambda_kj`.
//!
//! Parameters are `k x k` row-major over the solution's species, diagonal
//! zero (`tau_ii = 0`, `Lambda_ii = 1`).

/// Which activity model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ActivityKind {
    Nrtl,
    Wilson,
}

/// The activity model of one solution phase.
#[derive(Clone, Debug)]
pub struct Solution {
    pub kind: ActivityKind,
    /// The phase's species (indices into the system's species), `k` of them.
    pub species: Vec<usize>,
    /// `k x k`: NRTL `tau = a + b / T`; Wilson `ln Lambda = a + b / T`.
    pub a: Vec<f64>,
    pub b: Vec<f64>,
    /// `k x k`: NRTL's `alpha` (symmetric); unused by Wilson.
    pub alpha: Vec<f64>,
}

impl Solution {
    /// `ln gamma` of the phase's species at mole fractions `x` (`k`) and
    /// temperature `t` (K), into `out` (`k`); `work` holds `2 k` values.
    pub fn ln_gamma(&self, x: &[f64], t: f64, out: &mut [f64], work: &mut [f64]) {
        let k = self.species.len();
        let (sums, cross) = work.split_at_mut(k);
        let at = |m: &[f64], i: usize, j: usize| m[i * k + j];
        match self.kind {
            ActivityKind::Nrtl => {
                let tau = |i: usize, j: usize| at(&self.a, i, j) + at(&self.b, i, j) / t;
                let g = |i: usize, j: usize| (-at(&self.alpha, i, j) * tau(i, j)).exp();
                for j in 0..k {
                    let (mut s, mut c) = (0.0, 0.0);
                    for m in 0..k {
                        let gmj = g(m, j);
                        s += x[m] * gmj;
                        c += x[m] * tau(m, j) * gmj;
                    }
                    sums[j] = s;
                    cross[j] = c;
                }
                for i in 0..k {
                    let mut v = cross[i] / sums[i];
                    for j in 0..k {
                        v += x[j] * g(i, j) / sums[j] * (tau(i, j) - cross[j] / sums[j]);
                    }
                    out[i] = v;
                }
            }
            ActivityKind::Wilson => {
                let lambda = |i: usize, j: usize| (at(&self.a, i, j) + at(&self.b, i, j) / t).exp();
                for i in 0..k {
                    sums[i] = (0..k).map(|j| x[j] * lambda(i, j)).sum();
                }
                for i in 0..k {
                    let tail: f64 = (0..k).map(|m| x[m] * lambda(m, i) / sums[m]).sum();
                    out[i] = 1.0 - sums[i].ln() - tail;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_parameters_are_an_ideal_solution() {
        for kind in [ActivityKind::Nrtl, ActivityKind::Wilson] {
            let model = Solution {
                kind,
                species: vec![0, 1, 2],
                a: vec![0.0; 9],
                b: vec![0.0; 9],
                alpha: vec![0.3; 9],
            };
            let (mut out, mut work) = ([1.0; 3], [0.0; 6]);
            model.ln_gamma(&[0.2, 0.3, 0.5], 350.0, &mut out, &mut work);
            assert!(out.iter().all(|v| v.abs() < 1e-15), "{kind:?}: {out:?}");
        }
    }
}
