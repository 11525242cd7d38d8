//! Fugacity coefficients of a gas mixture from a cubic equation of state.
//!
//! Peng and Robinson (1976) and Soave's Redlich-Kwong (1972) equations with
//! the van der Waals one-fluid mixing rules:
//!
//! * `a_i = Omega_a (R Tc_i)^2 / Pc_i * alpha_i(T)`,
//!   `alpha_i = (1 + m(omega_i) (1 - sqrt(T / Tc_i)))^2`, `b_i = Omega_b R Tc_i / Pc_i`;
//! * `a = sum_ij y_i y_j sqrt(a_i a_j) (1 - k_ij)`, `b = sum_i y_i b_i`;
//! * `A = a P / (R T)^2`, `B = b P / (R T)`, and `Z` the largest real root of
//!   the cubic (the vapour-like one);
//! * `ln phi_i = B_i / B (Z - 1) - ln(Z - B) - A / (d B) (2 sum_j y_j a_ij / a - B_i / B) L`,
//!   with `L = ln((Z + u2 B) / (Z + u1 B))` and `d = u2 - u1`: `u1, u2 = 1 -+ sqrt 2`
//!   for Peng-Robinson, `0, 1` for Soave.
//!
//! A single real root counts as liquid-like, and the mixture as having no
//! vapour-like root, when it lies below the equation's critical
//! compressibility at the mixture's volume scale (`V < Z_c R T_pc / P_pc`
//! with Kay's pseudo-critical constants, `T_pc = sum y_i Tc_i`, `P_pc =
//! sum y_i Pc_i`) at a temperature below `T_pc`: then [`LnPhiError`].

/// Gas constant in bar cm^3 / (mol K) (CODATA 2018: 8.314462618 J/(mol K)).
const R_BAR_CM3: f64 = 83.144_626_18;

/// Which cubic equation.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CubicKind {
    PengRobinson,
    Soave,
}

impl CubicKind {
    /// `(Omega_a, Omega_b, u1, u2, Z_c)`.
    fn constants(self) -> (f64, f64, f64, f64, f64) {
        match self {
            // (the critical-point values; Peng and Robinson print 0.45724 and
            // 0.07780 rounded, Soave 0.42748 and 0.08664)
            CubicKind::PengRobinson => (
                0.457_235_528_921_382,
                0.077_796_073_903_888_4,
                1.0 - std::f64::consts::SQRT_2,
                1.0 + std::f64::consts::SQRT_2,
                0.307_401,
            ),
            CubicKind::Soave => (
                0.427_480_233_540_341,
                0.086_640_349_964_957_7,
                0.0,
                1.0,
                1.0 / 3.0,
            ),
        }
    }

    /// `m(omega)` of `alpha`.
    fn m(self, omega: f64) -> f64 {
        match self {
            CubicKind::PengRobinson => 0.374_64 + 1.542_26 * omega - 0.269_92 * omega * omega,
            CubicKind::Soave => 0.480 + 1.574 * omega - 0.176 * omega * omega,
        }
    }
}

/// The equation of state of a system's gas: constants of its species (in
/// the system's species order; entries of species not in the gas are not
/// read). Made by [`Cubic::new`], which also folds each species' constants
/// into the few numbers a state needs: the fields are for reading (a
/// changed field would not reach the folded constants; make a new one).
#[derive(Clone, Debug)]
pub struct Cubic {
    pub kind: CubicKind,
    /// Critical temperature, K.
    pub tc: Vec<f64>,
    /// Critical pressure, bar.
    pub pc: Vec<f64>,
    /// Acentric factor.
    pub omega: Vec<f64>,
    /// Binary parameters `k_ij`, `S x S` row-major, symmetric, zero diagonal.
    pub kij: Vec<f64>,
    /// Per species: `sqrt(Omega_a (R Tc)^2 / Pc)`, `m(omega)`, `1 / sqrt(Tc)`
    /// and `b_i = Omega_b R Tc / Pc` (a state then takes one square root,
    /// not two and three divisions a species).
    folded: Vec<[f64; 4]>,
}

/// The cubic has no vapour-like root at this composition, temperature and
/// pressure (see the module docs).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LnPhiError;

impl Cubic {
    /// The equation `kind` with each species' critical temperature `tc` (K),
    /// pressure `pc` (bar) and acentric factor `omega`, and the binary
    /// parameters `kij` (`S x S`).
    pub fn new(
        kind: CubicKind,
        tc: Vec<f64>,
        pc: Vec<f64>,
        omega: Vec<f64>,
        kij: Vec<f64>,
    ) -> Self {
        let (omega_a, omega_b, _, _, _) = kind.constants();
        let folded = tc
            .iter()
            .zip(&pc)
            .zip(&omega)
            .map(|((&tc, &pc), &w)| {
                [
                    (omega_a * (R_BAR_CM3 * tc).powi(2) / pc).sqrt(),
                    kind.m(w),
                    1.0 / tc.sqrt(),
                    omega_b * R_BAR_CM3 * tc / pc,
                ]
            })
            .collect();
        Cubic {
            kind,
            tc,
            pc,
            omega,
            kij,
            folded,
        }
    }

    /// `ln phi` of the species `gas` lists (indices into the system's
    /// species), at gas mole fractions `y` (one per entry of `gas`),
    /// temperature `t` (K) and pressure `p` (bar), into `out` (one per entry
    /// of `gas`). `work` needs `2 * gas.len()` values.
    pub fn ln_phi(
        &self,
        gas: &[usize],
        y: &[f64],
        t: f64,
        p: f64,
        out: &mut [f64],
        work: &mut [f64],
    ) -> Result<(), LnPhiError> {
        let (_, _, u1, u2, _) = self.kind.constants();
        let mix = self.mixture(gas, y, t, p, work)?;
        let sum_a = &work[gas.len()..2 * gas.len()];
        let (big_a, big_b, z) = (mix.big_a, mix.big_b, mix.z);
        let log_term = ((z + u2 * big_b) / (z + u1 * big_b)).ln();
        let lead = big_a / ((u2 - u1) * big_b);
        let ln_free = (z - big_b).ln();
        let (inv_b, inv_a) = (1.0 / mix.b, 1.0 / mix.a);
        for (k, &i) in gas.iter().enumerate() {
            let b_ratio = self.folded[i][3] * inv_b;
            out[k] = b_ratio * (z - 1.0)
                - ln_free
                - lead * (2.0 * sum_a[k] * inv_a - b_ratio) * log_term;
        }
        Ok(())
    }

    /// The compressibility factor `Z` of the gas at mole fractions `y` (one
    /// per entry of `gas`), `t` (K) and `p` (bar); `work` needs `2 *
    /// gas.len()` values.
    pub fn compressibility(
        &self,
        gas: &[usize],
        y: &[f64],
        t: f64,
        p: f64,
        work: &mut [f64],
    ) -> Result<f64, LnPhiError> {
        Ok(self.mixture(gas, y, t, p, work)?.z)
    }

    /// The mixture's `a`, `b`, `A`, `B` and vapour-like `Z`; `work` receives
    /// `sqrt a_i` and then `sum_j y_j a_ij` (one per entry of `gas` each).
    fn mixture(
        &self,
        gas: &[usize],
        y: &[f64],
        t: f64,
        p: f64,
        work: &mut [f64],
    ) -> Result<Mixture, LnPhiError> {
        let g = gas.len();
        let (_, _, _, _, z_c) = self.kind.constants();
        let s = self.tc.len();
        let rt = R_BAR_CM3 * t;
        let sqrt_t = t.sqrt();
        let (sqrt_a, sum_a) = work.split_at_mut(g);
        let mut b = 0.0;
        let (mut t_pc, mut p_pc) = (0.0, 0.0);
        for (k, &i) in gas.iter().enumerate() {
            let [sqrt_ac, m, inv_sqrt_tc, b_i] = self.folded[i];
            // sqrt(a_i) = sqrt(Omega_a (R Tc)^2 / Pc) |alpha|, alpha = 1 + m (1 - sqrt(T / Tc))
            sqrt_a[k] = sqrt_ac * (1.0 + m * (1.0 - sqrt_t * inv_sqrt_tc)).abs();
            b += y[k] * b_i;
            t_pc += y[k] * self.tc[i];
            p_pc += y[k] * self.pc[i];
        }
        let mut a = 0.0;
        for k in 0..g {
            let mut row = 0.0;
            for l in 0..g {
                row += y[l] * sqrt_a[k] * sqrt_a[l] * (1.0 - self.kij[gas[k] * s + gas[l]]);
            }
            sum_a[k] = row;
            a += y[k] * row;
        }
        let big_a = a * p / (rt * rt);
        let big_b = b * p / rt;
        let (z, roots) = largest_root(self.kind, big_a, big_b);
        if !(z > big_b && z.is_finite()) {
            return Err(LnPhiError);
        }
        if roots == 1 && t < t_pc && z * rt / p < z_c * R_BAR_CM3 * t_pc / p_pc {
            return Err(LnPhiError);
        }
        Ok(Mixture {
            a,
            b,
            big_a,
            big_b,
            z,
        })
    }
}

/// A mixture's parameters at one state ([`Cubic::mixture`]).
struct Mixture {
    a: f64,
    b: f64,
    big_a: f64,
    big_b: f64,
    z: f64,
}

/// `(c2, c1, c0)` of the cubic `Z^3 + c2 Z^2 + c1 Z + c0 = 0` in `A`, `B`.
fn coefficients(kind: CubicKind, a: f64, b: f64) -> (f64, f64, f64) {
    match kind {
        CubicKind::PengRobinson => (
            b - 1.0,
            a - 3.0 * b * b - 2.0 * b,
            -(a * b - b * b - b * b * b),
        ),
        CubicKind::Soave => (-1.0, a - b - b * b, -a * b),
    }
}

/// The largest real root of the cubic in `Z` and how many real roots it
/// has (1 or 3).
fn largest_root(kind: CubicKind, a: f64, b: f64) -> (f64, usize) {
    let (c2, c1, c0) = coefficients(kind, a, b);
    let q = (3.0 * c1 - c2 * c2) / 9.0;
    let r = (9.0 * c2 * c1 - 27.0 * c0 - 2.0 * c2 * c2 * c2) / 54.0;
    let disc = q * q * q + r * r;
    let roots = if disc <= 0.0 && q < 0.0 { 3 } else { 1 };
    // Newton from Z = 1 + B, an upper bound of the roots of both equations
    // (Z = V / (V - b) - (attraction, positive) <= Z / (Z - B)): from the
    // right of the largest root, where the cubic is convex, the iterates fall
    // to it monotonically, without the closed forms' acos, cos or cbrt.
    let mut z = 1.0 + b;
    for _ in 0..NEWTON_ROOT_STEPS {
        let f = ((z + c2) * z + c1) * z + c0;
        let df = (3.0 * z + 2.0 * c2) * z + c1;
        let step = f / df;
        let settled = 4.0 * f64::EPSILON * z;
        if !(df > 0.0 && step > -settled) {
            break; // (not on the convex side: the closed form below)
        }
        z -= step;
        if step.abs() <= settled {
            return (z, roots);
        }
    }
    closed_form_root(c2, c1, c0, q, r, disc)
}

/// Newton steps [`largest_root`] takes before it uses the closed form.
const NEWTON_ROOT_STEPS: usize = 40;

/// The largest real root by the trigonometric or Cardano form, polished by
/// Newton (where the iteration from the right does not settle).
fn closed_form_root(c2: f64, c1: f64, c0: f64, q: f64, r: f64, disc: f64) -> (f64, usize) {
    let (mut z, roots) = if disc <= 0.0 && q < 0.0 {
        let theta = (r / (-q * q * q).sqrt()).clamp(-1.0, 1.0).acos();
        (2.0 * (-q).sqrt() * (theta / 3.0).cos() - c2 / 3.0, 3)
    } else {
        let sq = disc.max(0.0).sqrt();
        ((r + sq).cbrt() + (r - sq).cbrt() - c2 / 3.0, 1)
    };
    for _ in 0..3 {
        let f = ((z + c2) * z + c1) * z + c0;
        let df = (3.0 * z + 2.0 * c2) * z + c1;
        if df == 0.0 {
            break;
        }
        z -= f / df;
    }
    (z, roots)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_vanishing_pressure_gives_ideal_gas() {
        let eos = Cubic::new(
            CubicKind::PengRobinson,
            vec![126.2, 190.6],
            vec![33.98, 45.99],
            vec![0.037, 0.011],
            vec![0.0; 4],
        );
        let (mut out, mut work) = ([0.0; 2], [0.0; 4]);
        eos.ln_phi(&[0, 1], &[0.3, 0.7], 300.0, 1e-8, &mut out, &mut work)
            .unwrap();
        assert!(out.iter().all(|v| v.abs() < 1e-9));
    }

    #[test]
    fn newton_from_the_right_finds_the_largest_root_the_closed_forms_give() {
        // the closed forms (trigonometric with three real roots, Cardano
        // with one) are the independent reference; A and B cover gas-like,
        // three-root and liquid-like states
        for kind in [CubicKind::PengRobinson, CubicKind::Soave] {
            for i in 0..60 {
                for j in 1..40 {
                    let (a, b) = (0.05 * i as f64, 0.01 * j as f64);
                    let (c2, c1, c0) = coefficients(kind, a, b);
                    let q = (3.0 * c1 - c2 * c2) / 9.0;
                    let r = (9.0 * c2 * c1 - 27.0 * c0 - 2.0 * c2 * c2 * c2) / 54.0;
                    let (want, n_want) = closed_form_root(c2, c1, c0, q, r, q * q * q + r * r);
                    let (z, n) = largest_root(kind, a, b);
                    assert_eq!(n, n_want, "{kind:?} {a} {b}");
                    assert!(
                        (z - want).abs() <= 1e-12 * want.abs().max(1.0),
                        "{kind:?} {a} {b}: {z} vs {want}"
                    );
                }
            }
        }
    }

    #[test]
    fn the_largest_root_solves_the_cubic() {
        for kind in [CubicKind::PengRobinson, CubicKind::Soave] {
            for (a, b) in [(0.05, 0.01), (0.9, 0.08), (2.0, 0.2), (0.3, 0.05)] {
                let (z, _) = largest_root(kind, a, b);
                let (c2, c1, c0) = coefficients(kind, a, b);
                let f: f64 = ((z + c2) * z + c1) * z + c0;
                assert!(f.abs() < 1e-13, "{kind:?} {a} {b}: {f}");
            }
        }
    }
}
