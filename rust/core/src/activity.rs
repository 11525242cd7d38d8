//! Activity coefficients of a liquid solution phase.
//!
//! * NRTL (Renon and Prausnitz, AIChE J. 14, 1968): `tau_ij = a_ij + b_ij / T`,
//!   `G_ij = exp(-alpha_ij tau_ij)`,
//!   `ln gamma_i = C_i / S_i + sum_j x_j G_ij / S_j (tau_ij - C_j / S_j)` with
//!   `S_j = sum_k x_k G_kj` and `C_j = sum_k x_k tau_kj G_kj`;
//! * Wilson (J. Am. Chem. Soc. 86, 1964): `ln Lambda_ij = a_ij + b_ij / T`,
//!   `ln gamma_i = 1 - ln sum_j x_j Lambda_ij - sum_k x_k Lambda_ki / sum_j x_j Lambda_kj`;
//! * UNIQUAC (Abrams and Prausnitz, AIChE J. 21, 1975), with volume and area
//!   parameters `r_i`, `q_i`, `z = 10` and `ln tau_ij = a_ij + b_ij / T`:
//!   the combinatorial part `ln(Phi_i/x_i) + z/2 q_i ln(theta_i/Phi_i) + l_i -
//!   Phi_i/x_i sum_j x_j l_j` (`l_i = z/2 (r_i - q_i) - (r_i - 1)`, written in
//!   ratios so that a species at zero has its infinite-dilution value) and
//!   the residual `q_i (1 - ln sum_j theta_j tau_ji - sum_j theta_j tau_ij /
//!   sum_k theta_k tau_kj)`.
//!
//! Parameters are `k x k` row-major over the solution's species, diagonal
//! zero (`tau_ii = 0`, `Lambda_ii = 1`).

/// Which activity model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ActivityKind {
    Nrtl,
    Wilson,
    Uniquac,
}

/// UNIQUAC's coordination number.
const Z_HALF: f64 = 5.0;

/// The activity model of one solution phase.
#[derive(Clone, Debug)]
pub struct Solution {
    pub kind: ActivityKind,
    /// The phase's species (indices into the system's species), `k` of them.
    pub species: Vec<usize>,
    /// `k x k`: NRTL `tau = a + b / T`; Wilson `ln Lambda = a + b / T`.
    pub a: Vec<f64>,
    pub b: Vec<f64>,
    /// `k x k`: NRTL's `alpha` (symmetric); unused by the others.
    pub alpha: Vec<f64>,
    /// `k` each: UNIQUAC's volume and area parameters (empty otherwise).
    pub r: Vec<f64>,
    pub q: Vec<f64>,
}

impl Solution {
    /// `ln gamma` of the phase's species at mole fractions `x` (`k`) and
    /// temperature `t` (K), into `out` (`k`); `work` holds `2 k` values.
    /// (UNIQUAC's `ln tau` is `a + b / T`.)
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
            ActivityKind::Uniquac => {
                let (r, q) = (&self.r, &self.q);
                let tau = |i: usize, j: usize| (at(&self.a, i, j) + at(&self.b, i, j) / t).exp();
                let rx: f64 = (0..k).map(|j| r[j] * x[j]).sum();
                let qx: f64 = (0..k).map(|j| q[j] * x[j]).sum();
                let l = |i: usize| Z_HALF * (r[i] - q[i]) - (r[i] - 1.0);
                let lx: f64 = (0..k).map(|j| x[j] * l(j)).sum();
                let theta = |j: usize| q[j] * x[j] / qx;
                for j in 0..k {
                    sums[j] = (0..k).map(|m| theta(m) * tau(m, j)).sum();
                }
                for i in 0..k {
                    let phi_over_x = r[i] / rx;
                    let theta_over_phi = (q[i] / qx) / phi_over_x;
                    let combinatorial =
                        phi_over_x.ln() + Z_HALF * q[i] * theta_over_phi.ln() + l(i)
                            - phi_over_x * lx;
                    let tail: f64 = (0..k).map(|j| theta(j) * tau(i, j) / sums[j]).sum();
                    out[i] = combinatorial + q[i] * (1.0 - sums[i].ln() - tail);
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
        for kind in [
            ActivityKind::Nrtl,
            ActivityKind::Wilson,
            ActivityKind::Uniquac,
        ] {
            let model = Solution {
                kind,
                species: vec![0, 1, 2],
                a: vec![0.0; 9],
                b: vec![0.0; 9],
                alpha: vec![0.3; 9],
                r: vec![1.5; 3],
                q: vec![1.2; 3],
            };
            let (mut out, mut work) = ([1.0; 3], [0.0; 6]);
            model.ln_gamma(&[0.2, 0.3, 0.5], 350.0, &mut out, &mut work);
            assert!(out.iter().all(|v| v.abs() < 1e-15), "{kind:?}: {out:?}");
        }
    }
}
