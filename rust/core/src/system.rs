//! The reaction system: species, their phases and the stoichiometric matrix,
//! with the structural checks done once at construction.

use crate::error::CoreError;
use crate::face::FaceMemo;
use crate::lp::{maximize, LpOutcome};

/// The phase a species belongs to. Activities are ideal.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Phase {
    /// The ideal-gas mixture: `a = y P / P0`.
    Gas,
    /// Ideal solution number `k` (`a = x`); species with the same `k` share
    /// it (0 is the default liquid).
    Solution(u8),
    /// A pure condensed species (a solid, or a liquid of its own): a phase
    /// of one species, `a = 1` while present.
    Pure,
}

/// Most mixture phases a system may have: the gas and seven solutions.
pub const MAX_MIXTURES: usize = 8;
/// Most phases a system may have (mixtures and pure species together): the
/// per-case masks of absent phases are 64-bit words.
pub const MAX_PHASES: usize = 64;

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
    /// Per species, the index of its phase: 0 the gas, then the solutions
    /// (`1..n_mixtures`, in order of their numbers), then one per pure
    /// species (in species order).
    phase_index: Vec<usize>,
    /// Mixture phases (the gas, whether or not it has species, and the
    /// solutions).
    n_mixtures: usize,
    /// Every phase: the mixtures, then the pure species.
    n_phases: usize,
    /// Standard-state pressure of the equilibrium constants, bar.
    p0: f64,
    /// Species with a non-zero coefficient in some reaction.
    reactive: Vec<bool>,
    /// [`System::basis_gain`], computed on first use.
    basis_gain: std::sync::OnceLock<Option<f64>>,
    /// Faces of the zero patterns met so far (see [`FaceMemo`]).
    faces: FaceMemo,
    /// [`System::reduced`], computed on first use.
    reduced: std::sync::OnceLock<Option<Box<crate::condensed::Reduced>>>,
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
        let (phase_index, n_mixtures, n_phases) = index_phases(&phases)?;
        Ok(System {
            n_species,
            n_reactions,
            stoich,
            phases,
            phase_index,
            n_mixtures,
            n_phases,
            p0,
            reactive,
            basis_gain: std::sync::OnceLock::new(),
            faces: FaceMemo::default(),
            reduced: std::sync::OnceLock::new(),
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

    /// The index of species `i`'s phase (see [`System::n_phases`]).
    #[inline(always)]
    pub fn phase_index(&self, i: usize) -> usize {
        self.phase_index[i]
    }

    /// Number of phases: index 0 is the gas, `1..n_mixtures()` the
    /// solutions, the rest one pure species each.
    pub fn n_phases(&self) -> usize {
        self.n_phases
    }

    /// Number of mixture phases (the gas and the solutions).
    pub fn n_mixtures(&self) -> usize {
        self.n_mixtures
    }

    /// Whether species `i` is a pure condensed species.
    #[inline(always)]
    pub fn is_pure(&self, i: usize) -> bool {
        self.phases[i] == Phase::Pure
    }

    /// Whether any species is a pure condensed species.
    pub fn has_pure(&self) -> bool {
        self.n_phases > self.n_mixtures
    }

    /// Whether every species is a gas.
    pub fn gas_only(&self) -> bool {
        self.phases.iter().all(|&p| p == Phase::Gas)
    }

    /// Which species belong to phase `phase`.
    pub fn in_phase(&self, phase: usize) -> Vec<bool> {
        self.phase_index.iter().map(|&p| p == phase).collect()
    }

    /// Whether species `i` takes part in any reaction (otherwise it is inert).
    pub fn is_reactive(&self, i: usize) -> bool {
        self.reactive[i]
    }

    /// The system without its pure species ([`crate::condensed::reduce`]),
    /// computed on first use.
    pub fn reduced(&self) -> Option<&crate::condensed::Reduced> {
        self.reduced
            .get_or_init(|| crate::condensed::reduce(self).map(Box::new))
            .as_deref()
    }

    /// Faces already analysed for this system.
    pub fn face_memo(&self) -> &FaceMemo {
        &self.faces
    }

    /// The largest factor by which rewriting the reactions per case can
    /// enlarge their residuals: the maximum over every set `P` of `R`
    /// species that can serve as a basis's pivots (`nu[:, P]` invertible)
    /// of `||nu[:, P]^-1||_inf`. The basis reactions' residuals are
    /// `nu[:, P]^-1` times the given ones', so a point whose given residuals
    /// are at most `tol / gain` meets `tol` in whatever basis the general
    /// solve would choose: that is how the lane path, which iterates on the
    /// reactions as given, keeps the general path's meaning of `tol`.
    /// `None` when there are more than [`BASIS_SETS_LIMIT`] candidate sets
    /// (the lanes then have the general solve check each point they stop
    /// at). Computed on first use
    /// (by the components, see `basis_gain` below).
    pub fn basis_gain(&self) -> Option<f64> {
        *self.basis_gain.get_or_init(|| {
            basis_gain(
                &self.stoich,
                self.n_reactions,
                self.n_species,
                &self.reactive,
            )
        })
    }
}

/// Each species' phase index, the number of mixture phases and of phases
/// (see [`System::phase_index`]); an error past [`MAX_MIXTURES`] or
/// [`MAX_PHASES`].
fn index_phases(phases: &[Phase]) -> Result<(Vec<usize>, usize, usize), CoreError> {
    let mut solutions: Vec<u8> = phases
        .iter()
        .filter_map(|p| match p {
            Phase::Solution(k) => Some(*k),
            _ => None,
        })
        .collect();
    solutions.sort_unstable();
    solutions.dedup();
    let n_mixtures = 1 + solutions.len();
    if n_mixtures > MAX_MIXTURES {
        return Err(CoreError::Shape(format!(
            "{} solution phases; at most {} are supported",
            solutions.len(),
            MAX_MIXTURES - 1
        )));
    }
    let mut next = n_mixtures;
    let mut index = Vec::with_capacity(phases.len());
    for p in phases {
        index.push(match p {
            Phase::Gas => 0,
            Phase::Solution(k) => 1 + solutions.binary_search(k).unwrap_or(0),
            Phase::Pure => {
                next += 1;
                next - 1
            }
        });
    }
    if next > MAX_PHASES {
        return Err(CoreError::Shape(format!(
            "{next} phases (mixtures and pure species); at most {MAX_PHASES} are supported"
        )));
    }
    Ok((index, n_mixtures, next))
}

/// Component sets [`System::basis_gain`] examines at most (binomial(M, M -
/// R) of them for M reactive species: 10,626 for 20 reactions among 24).
pub const BASIS_SETS_LIMIT: usize = 50_000;

/// [`System::basis_gain`], by the components rather than the pivots: a basis
/// is fixed by its `C = M - R` components (the species that are not pivots),
/// usually a handful, and with `A` the `C x M` conserved-quantity matrix
/// (`nu A^T = 0`) pivot `p`'s basis reaction is `e_p - sum_c x_c e_c` with
/// `A_C x = A_p`. A basis reaction `b` lies in the span of the given ones,
/// so its coefficients on them are `b nu^+` (`nu^+` the pseudo-inverse):
/// `C^3 + R (C^2 + C R)` work per set instead of `R^3`.
fn basis_gain(stoich: &[f64], r: usize, s: usize, reactive: &[bool]) -> Option<f64> {
    let species: Vec<usize> = (0..s).filter(|&i| reactive[i]).collect();
    let m = species.len();
    let mut nu = vec![0.0; r * m];
    for j in 0..r {
        for (col, &i) in species.iter().enumerate() {
            nu[j * m + col] = stoich[j * s + i];
        }
    }
    let (null, c) = crate::linalg::null_space(&nu, r, m, DEPENDENCE_TOL);
    if c == 0 || c + r != m {
        return None; // not reachable: a bounded system conserves something
    }
    // binomial(m, c), stopping once it passes the limit
    let mut count: usize = 1;
    for k in 0..c.min(m - c) {
        count = count * (m - k) / (k + 1);
        if count > BASIS_SETS_LIMIT {
            return None;
        }
    }
    // nu^+ = nu^T (nu nu^T)^-1, M x R
    let mut gram = vec![0.0; r * r];
    for j in 0..r {
        for k in 0..r {
            gram[j * r + k] = (0..m).map(|i| nu[j * m + i] * nu[k * m + i]).sum();
        }
    }
    let mut gram_inv = vec![0.0; r * r];
    if !invert(&mut gram, &mut gram_inv, r) {
        return None; // not reachable: the reactions are independent
    }
    let mut pinv = vec![0.0; m * r];
    for i in 0..m {
        for j in 0..r {
            pinv[i * r + j] = (0..r).map(|l| nu[l * m + i] * gram_inv[l * r + j]).sum();
        }
    }
    // A[a][i] = null[i * c + a]
    let scale = null.iter().fold(0.0_f64, |v, x| v.max(x.abs()));
    let mut pick: Vec<usize> = (0..c).collect();
    let (mut block, mut block_inv) = (vec![0.0; c * c], vec![0.0; c * c]);
    // y = A_C^-T nu^+_C (C x R): then pivot p's coefficients are
    // nu^+_p - A_p^T y, as x = A_C^-1 A_p
    let mut y = vec![0.0; c * r];
    let mut other = vec![true; m];
    let mut row = vec![0.0; r];
    let mut gain: f64 = 0.0;
    loop {
        for a in 0..c {
            for (b, &i) in pick.iter().enumerate() {
                block[a * c + b] = null[i * c + a];
            }
        }
        if invert_scaled(&mut block, &mut block_inv, c, scale) {
            y.fill(0.0);
            for (b, &i) in pick.iter().enumerate() {
                let pinv_i = &pinv[i * r..(i + 1) * r];
                for (&q, y_a) in block_inv[b * c..(b + 1) * c]
                    .iter()
                    .zip(y.chunks_exact_mut(r))
                {
                    for (v, &pv) in y_a.iter_mut().zip(pinv_i) {
                        *v += q * pv;
                    }
                }
            }
            other.fill(true);
            for &i in &pick {
                other[i] = false;
            }
            for p in (0..m).filter(|&i| other[i]) {
                row.copy_from_slice(&pinv[p * r..(p + 1) * r]);
                for (&w, y_a) in null[p * c..(p + 1) * c].iter().zip(y.chunks_exact(r)) {
                    for (v, &ya) in row.iter_mut().zip(y_a) {
                        *v -= w * ya;
                    }
                }
                gain = gain.max(row.iter().map(|v| v.abs()).sum());
            }
        }
        // next combination in lexicographic order
        let Some(k) = (0..c).rev().find(|&k| pick[k] < m - c + k) else {
            break;
        };
        pick[k] += 1;
        for t in k + 1..c {
            pick[t] = pick[t - 1] + 1;
        }
    }
    Some(gain)
}

/// `A^-1` of the `n x n` matrix `a` (overwritten) into `inv`; false when `A`
/// is singular.
fn invert(a: &mut [f64], inv: &mut [f64], n: usize) -> bool {
    let scale = a.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    invert_scaled(a, inv, n, scale)
}

/// Gauss-Jordan elimination with partial pivoting; a pivot below
/// [`DEPENDENCE_TOL`] of `scale` means singular.
fn invert_scaled(a: &mut [f64], inv: &mut [f64], n: usize, scale: f64) -> bool {
    inv.fill(0.0);
    for i in 0..n {
        inv[i * n + i] = 1.0;
    }
    for col in 0..n {
        let Some(row) =
            (col..n).max_by(|&x, &y| a[x * n + col].abs().total_cmp(&a[y * n + col].abs()))
        else {
            return false;
        };
        if a[row * n + col].abs() <= DEPENDENCE_TOL * scale {
            return false;
        }
        for k in 0..n {
            a.swap(row * n + k, col * n + k);
            inv.swap(row * n + k, col * n + k);
        }
        let p = a[col * n + col];
        for k in 0..n {
            a[col * n + k] /= p;
            inv[col * n + k] /= p;
        }
        for i in 0..n {
            let f = a[i * n + col];
            if i != col && f != 0.0 {
                for k in 0..n {
                    a[i * n + k] -= f * a[col * n + k];
                    inv[i * n + k] -= f * inv[col * n + k];
                }
            }
        }
    }
    true
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
    fn basis_gain_is_the_largest_inverse_row_sum_over_pivot_sets() {
        // A = B, B = C: the pivot sets {A, B}, {A, C}, {B, C} have inverses
        // [[-1, -1], [0, -1]], [[-1, 0], [0, 1]], [[1, 0], [1, 1]] (by hand),
        // whose largest absolute row sums are 2, 1 and 2.
        let nu = vec![-1.0, 1.0, 0.0, 0.0, -1.0, 1.0];
        let sys = System::new(nu, 2, 3, gas(3), 1.0).unwrap();
        assert!((sys.basis_gain().unwrap() - 2.0).abs() < 1e-15);
        // An inert species is never a pivot: A = B with N2 beside it has the
        // sets {A} and {B}, each with inverse -1 or 1.
        let sys = System::new(vec![-1.0, 1.0, 0.0], 1, 3, gas(3), 1.0).unwrap();
        assert_eq!(sys.basis_gain(), Some(1.0));
        // 20 reactions among 48 species: binomial(40, 20) > 1e11 sets of the
        // 40 reactive ones.
        let (r, s) = (20, 48);
        let mut nu = vec![0.0; r * s];
        for j in 0..r {
            nu[j * s + j] = -1.0;
            nu[j * s + r + j] = 1.0;
        }
        let sys = System::new(nu, r, s, gas(s), 1.0).unwrap();
        assert_eq!(sys.basis_gain(), None);
    }

    #[test]
    fn basis_gain_by_components_equals_the_direct_enumeration_of_pivots() {
        // Reforming, shift and methanation-type reactions among CH4 H2O CO
        // H2 CO2 C2H6 with N2 inert: every pivot set, inverted directly.
        let (r, s) = (3, 7);
        #[rustfmt::skip]
        let nu = vec![
            -1.0, -1.0, 1.0, 3.0, 0.0, 0.0, 0.0,
            0.0, -1.0, -1.0, 1.0, 1.0, 0.0, 0.0,
            -2.0, 0.0, 0.0, 1.0, 0.0, 1.0, 0.0,
        ];
        let sys = System::new(nu.clone(), r, s, gas(s), 1.0).unwrap();
        let mut direct: f64 = 0.0;
        let (mut a, mut inv) = (vec![0.0; r * r], vec![0.0; r * r]);
        for p0 in 0..6 {
            for p1 in p0 + 1..6 {
                for p2 in p1 + 1..6 {
                    for j in 0..r {
                        for (k, &p) in [p0, p1, p2].iter().enumerate() {
                            a[j * r + k] = nu[j * s + p];
                        }
                    }
                    if invert(&mut a, &mut inv, r) {
                        for j in 0..r {
                            let row: f64 = inv[j * r..(j + 1) * r].iter().map(|v| v.abs()).sum();
                            direct = direct.max(row);
                        }
                    }
                }
            }
        }
        let gain = sys.basis_gain().unwrap();
        assert!(
            direct >= 1.0 && (gain - direct).abs() < 1e-12 * direct,
            "{gain} against {direct}"
        );
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
