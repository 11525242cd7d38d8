//! Species thermochemistry and reaction equilibrium constants from it, per
//! case, in the core (so a batch given temperatures costs about what one
//! given ln K costs).
//!
//! Every data form the Python layer accepts (NASA 7-coefficient
//! polynomials, Shomate, Cp polynomials, the Cp form with a `T^-2` term) is
//! one or more [`Segment`]s of one function family: with `tau = T / scale`,
//!
//! ```text
//! Cp/R = a0 + a1 tau + a2 tau^2 + a3 tau^3 + a4 tau^4 + e / tau^2
//! H/R  = scale (a0 tau + a1 tau^2/2 + a2 tau^3/3 + a3 tau^4/4 + a4 tau^5/5 - e / tau) + h
//! S/R  = a0 ln tau + a1 tau + a2 tau^2/2 + a3 tau^3/3 + a4 tau^4/4 - e / (2 tau^2) + s
//! ```
//!
//! (`H` on the formation scale, `S` on the data's standard pressure), so
//! `H` and `S` are the integrals of the same `Cp` in every range.

use rayon::prelude::*;

use crate::error::CoreError;

/// Gas constant, J/(mol K) (CODATA 2018, exact).
pub const GAS_CONSTANT: f64 = 8.314_462_618;

/// One temperature range of a species' data.
#[derive(Clone, Debug, PartialEq)]
pub struct Segment {
    /// Upper end of the range, K: the segment applies below it (or at it,
    /// with `closed`), above the previous segment's.
    pub upto: f64,
    pub closed: bool,
    /// Temperature unit of the coefficients, K (1 or 1000).
    pub scale: f64,
    /// `a0..a4` of `Cp/R` in powers of `tau`.
    pub a: [f64; 5],
    /// Coefficient of `tau^-2` in `Cp/R`.
    pub e: f64,
    /// Integration constants of `H/R` (K) and `S/R`.
    pub h: f64,
    pub s: f64,
}

/// A segment in the form evaluation wants: in kelvin (`scale` folded into
/// the coefficients: `a_k / scale^k`, `e scale^2`, `s - a0 ln(scale)`) with
/// the integrals' coefficients precomputed, so that `H` and `S` at one
/// temperature take no division and no logarithm of their own.
#[derive(Clone, Debug)]
struct Range {
    upto: f64,
    closed: bool,
    /// `Cp/R = cp[0] + cp[1] T + ... + cp[4] T^4 + e / T^2`.
    cp: [f64; 5],
    /// `H/R = T (hc[0] + hc[1] T + ... + hc[4] T^4) - e / T + h`: `hc[k] = cp[k] / (k + 1)`.
    hc: [f64; 5],
    /// `S/R = cp[0] ln T + T (sc[0] + sc[1] T + sc[2] T^2 + sc[3] T^3) - e / (2 T^2) + s`:
    /// `sc[k] = cp[k + 1] / (k + 1)`.
    sc: [f64; 4],
    e: f64,
    h: f64,
    s: f64,
}

impl Range {
    fn new(g: &Segment) -> Range {
        let mut cp = g.a;
        let mut p = 1.0;
        for v in cp.iter_mut() {
            *v /= p;
            p *= g.scale;
        }
        let hc = std::array::from_fn(|k| cp[k] / (k + 1) as f64);
        let sc = std::array::from_fn(|k| cp[k + 1] / (k + 1) as f64);
        Range {
            upto: g.upto,
            closed: g.closed,
            cp,
            hc,
            sc,
            e: g.e * g.scale * g.scale,
            h: g.h,
            s: g.s - g.a[0] * g.scale.ln(),
        }
    }

    /// `(H/R, S/R)` at `t` (K), given `ln t` and `1 / t` (shared by every
    /// species at one temperature: one logarithm a case, not one a species).
    #[inline]
    fn h_s(&self, t: f64, ln_t: f64, inv_t: f64) -> (f64, f64) {
        let (c, d) = (&self.hc, &self.sc);
        let h =
            t * (c[0] + t * (c[1] + t * (c[2] + t * (c[3] + t * c[4])))) - self.e * inv_t + self.h;
        let s = self.cp[0] * ln_t + t * (d[0] + t * (d[1] + t * (d[2] + t * d[3])))
            - 0.5 * self.e * inv_t * inv_t
            + self.s;
        (h, s)
    }

    /// `H/R` at `t` (K), given `1 / t`: [`Range::h_s`]'s without the entropy.
    #[inline]
    fn h(&self, t: f64, inv_t: f64) -> f64 {
        let c = &self.hc;
        t * (c[0] + t * (c[1] + t * (c[2] + t * (c[3] + t * c[4])))) - self.e * inv_t + self.h
    }

    /// `Cp/R` at `t` (K), given `1 / t` (no division: the energy balance
    /// of an adiabatic case evaluates it for every species at every step).
    #[inline]
    fn cp(&self, t: f64, inv_t: f64) -> f64 {
        let a = &self.cp;
        a[0] + t * (a[1] + t * (a[2] + t * (a[3] + t * a[4]))) + self.e * inv_t * inv_t
    }
}

/// A species' data: its segments in order of temperature.
#[derive(Clone, Debug)]
pub struct SpeciesThermo {
    ranges: Vec<Range>,
}

impl SpeciesThermo {
    /// Segments in increasing `upto`; the last one applies above its end too
    /// (extrapolation is reported by the caller, not refused here).
    pub fn new(segments: Vec<Segment>) -> Result<Self, CoreError> {
        let ordered = segments.windows(2).all(|w| w[0].upto <= w[1].upto);
        let finite = segments.iter().all(|g| {
            g.scale > 0.0
                && g.scale.is_finite()
                && g.a.iter().chain([&g.e, &g.h, &g.s]).all(|v| v.is_finite())
                && !g.upto.is_nan()
        });
        if segments.is_empty() || !ordered || !finite {
            return Err(CoreError::BadOption(
                "species data: segments must be finite and in increasing temperature".into(),
            ));
        }
        Ok(SpeciesThermo {
            ranges: segments.iter().map(Range::new).collect(),
        })
    }

    /// The range that applies at `t`: the first whose upper end is above `t`
    /// (or at it, when closed); the last one beyond them all. The ends
    /// increase, so the test is false then true along the ranges: a binary
    /// search (tables have tens of rows).
    #[inline]
    fn range(&self, t: f64) -> &Range {
        let last = self.ranges.len() - 1;
        let k = if last < 4 {
            self.ranges[..last]
                .iter()
                .position(|g| t < g.upto || (g.closed && t == g.upto))
                .unwrap_or(last)
        } else {
            self.ranges[..last].partition_point(|g| !(t < g.upto || (g.closed && t == g.upto)))
        };
        &self.ranges[k]
    }

    /// `(H/R, S/R)` at `t` (K): `H` in K on the formation scale.
    pub fn h_s(&self, t: f64) -> (f64, f64) {
        self.range(t).h_s(t, t.ln(), 1.0 / t)
    }

    /// `Cp/R` at `t` (K).
    pub fn cp(&self, t: f64) -> f64 {
        self.range(t).cp(t, 1.0 / t)
    }
}

/// Reactions as combinations of species data: `ln K_j = -sum_d c_jd G_d /
/// (R T) + shift_j` (the shift moves each reaction to the system's standard
/// pressure) and `dH_j = sum_d c_jd H_d`.
#[derive(Clone, Debug)]
pub struct ThermoTable {
    data: Vec<SpeciesThermo>,
    coef: Vec<f64>,
    shift: Vec<f64>,
}

/// Per-case outputs of [`ThermoTable::evaluate`], each `n x rows` (row-major).
pub struct ThermoOutputs<'a> {
    pub ln_k: &'a mut [f64],
    /// Standard reaction enthalpy, J/mol.
    pub dh: &'a mut [f64],
}

impl ThermoTable {
    /// `coef`: `shift.len()` rows of `data.len()` coefficients.
    pub fn new(
        data: Vec<SpeciesThermo>,
        coef: Vec<f64>,
        shift: Vec<f64>,
    ) -> Result<Self, CoreError> {
        if coef.len() != shift.len() * data.len()
            || !coef.iter().chain(&shift).all(|v| v.is_finite())
        {
            return Err(CoreError::Shape(format!(
                "thermo table: {} coefficients for {} reactions of {} data sets (or not finite)",
                coef.len(),
                shift.len(),
                data.len()
            )));
        }
        Ok(ThermoTable { data, coef, shift })
    }

    pub fn n_reactions(&self) -> usize {
        self.shift.len()
    }

    pub fn n_data(&self) -> usize {
        self.data.len()
    }

    /// The coefficients of the reactions in the data sets (`R x n_data`,
    /// row-major) and each reaction's constant `ln K` shift.
    pub(crate) fn coefficients(&self) -> (&[f64], &[f64]) {
        (&self.coef, &self.shift)
    }

    /// Data set `k`'s `(H/R, Cp/R)` at `t` (K), given `1 / t` (no logarithm).
    #[inline(always)]
    pub(crate) fn h_cp(&self, k: usize, t: f64, inv_t: f64) -> (f64, f64) {
        let range = self.data[k].range(t);
        (range.h(t, inv_t), range.cp(t, inv_t))
    }

    /// Data set `k`'s `S/R` at `t` (K), given `ln t` and `1 / t`.
    #[inline(always)]
    pub(crate) fn s(&self, k: usize, t: f64, ln_t: f64, inv_t: f64) -> f64 {
        self.data[k].range(t).h_s(t, ln_t, inv_t).1
    }

    /// Every data set's molar enthalpy (J/mol, formation scale) and heat
    /// capacity (J/(mol K)) at every temperature of `temps` (K), each
    /// `n x n_data` (row-major); NaN where a temperature is not positive and
    /// finite.
    pub fn species(&self, temps: &[f64], h: &mut [f64], cp: &mut [f64]) -> Result<(), CoreError> {
        per_temperature(
            temps,
            h,
            cp,
            self.data.len(),
            || (),
            |_, t, ln_t, inv_t, h, cp| {
                for (k, data) in self.data.iter().enumerate() {
                    let range = data.range(t);
                    h[k] = GAS_CONSTANT * range.h_s(t, ln_t, inv_t).0;
                    cp[k] = GAS_CONSTANT * range.cp(t, inv_t);
                }
            },
        )
    }

    /// `ln K` and `dH` of every reaction at every temperature of `temps`
    /// (K); NaN where a temperature is not positive and finite.
    pub fn evaluate(&self, temps: &[f64], out: ThermoOutputs) -> Result<(), CoreError> {
        let d = self.data.len();
        // per data set: G/(RT) and H/R at the temperature
        let scratch = || (vec![0.0; d], vec![0.0; d]);
        per_temperature(
            temps,
            out.ln_k,
            out.dh,
            self.n_reactions(),
            scratch,
            |(g, h), t, ln_t, inv_t, ln_k, dh| {
                self.g_h(t, ln_t, inv_t, g, h);
                for (j, (ln_k, dh)) in ln_k.iter_mut().zip(dh.iter_mut()).enumerate() {
                    *ln_k = self.ln_k_row(j, g);
                    let row = &self.coef[j * d..(j + 1) * d];
                    let mut sum_h = 0.0;
                    for (k, &c) in row.iter().enumerate() {
                        sum_h += c * h[k];
                    }
                    *dh = GAS_CONSTANT * sum_h;
                }
            },
        )
    }

    /// Every data set's `G/(RT)` and `H/R` at `t` (K), given `ln t` and `1 / t`.
    #[inline]
    fn g_h(&self, t: f64, ln_t: f64, inv_t: f64, g: &mut [f64], h: &mut [f64]) {
        for (k, data) in self.data.iter().enumerate() {
            let (hr, sr) = data.range(t).h_s(t, ln_t, inv_t);
            g[k] = hr * inv_t - sr;
            h[k] = hr;
        }
    }

    /// Reaction `j`'s `ln K` from every data set's `G/(RT)`.
    #[inline]
    fn ln_k_row(&self, j: usize, g: &[f64]) -> f64 {
        let d = self.data.len();
        let mut sum_g = 0.0;
        for (k, &c) in self.coef[j * d..(j + 1) * d].iter().enumerate() {
            sum_g += c * g[k];
        }
        -sum_g + self.shift[j]
    }

    /// `ln K` of every reaction at `t` (K, positive and finite) into `ln_k`,
    /// with the bits of [`ThermoTable::evaluate`]; `g` and `h` are scratch
    /// of `n_data` values each.
    pub(crate) fn ln_k_at(&self, t: f64, g: &mut [f64], h: &mut [f64], ln_k: &mut [f64]) {
        self.g_h(t, t.ln(), 1.0 / t, g, h);
        for (j, out) in ln_k.iter_mut().enumerate() {
            *out = self.ln_k_row(j, g);
        }
    }
}

/// Fills two outputs of `width` values a temperature (row-major): `row(scratch,
/// t, ln t, 1/t, a_row, b_row)` at every positive, finite `t`, NaN rows
/// elsewhere. Beyond one chunk of temperatures the chunks go to the thread
/// pool, each with its own `scratch()` (the same bits either way).
fn per_temperature<S, F>(
    temps: &[f64],
    a: &mut [f64],
    b: &mut [f64],
    width: usize,
    scratch: impl Fn() -> S + Sync,
    row: F,
) -> Result<(), CoreError>
where
    F: Fn(&mut S, f64, f64, f64, &mut [f64], &mut [f64]) + Sync,
{
    const CHUNK: usize = 4096;
    if a.len() != temps.len() * width || b.len() != temps.len() * width {
        return Err(CoreError::Shape(
            "thermo outputs do not match the temperatures".into(),
        ));
    }
    if width == 0 {
        return Ok(());
    }
    let work = |a: &mut [f64], b: &mut [f64], temps: &[f64]| {
        let mut s = scratch();
        for ((&t, a), b) in temps
            .iter()
            .zip(a.chunks_mut(width))
            .zip(b.chunks_mut(width))
        {
            if t > 0.0 && t < f64::INFINITY {
                row(&mut s, t, t.ln(), 1.0 / t, a, b);
            } else {
                a.fill(f64::NAN);
                b.fill(f64::NAN);
            }
        }
    };
    if temps.len() <= CHUNK {
        work(a, b, temps);
    } else {
        a.par_chunks_mut(CHUNK * width)
            .zip(b.par_chunks_mut(CHUNK * width))
            .zip(temps.par_chunks(CHUNK))
            .for_each(|((a, b), temps)| work(a, b, temps));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A species with `Cp = 7/2 R` and given H, S at 298.15 K, as one
    /// segment: `H/R = 3.5 T + h`, `S/R = 3.5 ln T + s`.
    fn diatomic(h298: f64, s298: f64) -> SpeciesThermo {
        let t0: f64 = 298.15;
        SpeciesThermo::new(vec![Segment {
            upto: f64::INFINITY,
            closed: false,
            scale: 1.0,
            a: [3.5, 0.0, 0.0, 0.0, 0.0],
            e: 0.0,
            h: h298 / GAS_CONSTANT - 3.5 * t0,
            s: s298 / GAS_CONSTANT - 3.5 * t0.ln(),
        }])
        .unwrap()
    }

    #[test]
    fn constant_heat_capacity_integrates_in_closed_form() {
        // H(T) = H298 + Cp (T - 298.15), S(T) = S298 + Cp ln(T / 298.15)
        // (the definitions of H and S for constant Cp).
        let co = diatomic(-110_530.0, 197.66);
        let (h, s) = co.h_s(1000.0);
        let cp = 3.5 * GAS_CONSTANT;
        assert!((h * GAS_CONSTANT - (-110_530.0 + cp * (1000.0 - 298.15))).abs() < 1e-8);
        assert!((s * GAS_CONSTANT - (197.66 + cp * (1000.0f64 / 298.15).ln())).abs() < 1e-11);
        assert_eq!(co.cp(700.0), 3.5);
    }

    #[test]
    fn segments_are_chosen_by_temperature_and_the_closed_end() {
        let seg = |upto: f64, closed: bool, a0: f64| Segment {
            upto,
            closed,
            scale: 1.0,
            a: [a0, 0.0, 0.0, 0.0, 0.0],
            e: 0.0,
            h: 0.0,
            s: 0.0,
        };
        let open =
            SpeciesThermo::new(vec![seg(1000.0, false, 1.0), seg(3000.0, false, 2.0)]).unwrap();
        let closed =
            SpeciesThermo::new(vec![seg(1000.0, true, 1.0), seg(3000.0, true, 2.0)]).unwrap();
        assert_eq!(
            (open.cp(999.0), open.cp(1000.0), open.cp(5000.0)),
            (1.0, 2.0, 2.0)
        );
        assert_eq!((closed.cp(1000.0), closed.cp(1000.5)), (1.0, 2.0));
        assert!(
            SpeciesThermo::new(vec![seg(3000.0, false, 1.0), seg(1000.0, false, 2.0)]).is_err()
        );
    }

    #[test]
    fn ln_k_is_minus_dg_over_rt_and_bad_temperatures_give_nan() {
        // 2 A = A2 with dH = -50 kJ/mol and dS = -100 J/(mol K) at every T
        // (equal Cp terms cancel): ln K = -(dH - T dS) / (R T), zero at 500 K.
        let a = diatomic(0.0, 200.0);
        let a2 = SpeciesThermo::new(vec![Segment {
            a: [7.0, 0.0, 0.0, 0.0, 0.0],
            h: -50_000.0 / GAS_CONSTANT - 7.0 * 298.15,
            s: 300.0 / GAS_CONSTANT - 7.0 * 298.15f64.ln(),
            upto: f64::INFINITY,
            closed: false,
            scale: 1.0,
            e: 0.0,
        }])
        .unwrap();
        let table = ThermoTable::new(vec![a, a2], vec![-2.0, 1.0], vec![0.0]).unwrap();
        let temps = [400.0, 500.0, -1.0, f64::NAN];
        let (mut ln_k, mut dh) = (vec![0.0; 4], vec![0.0; 4]);
        table
            .evaluate(
                &temps,
                ThermoOutputs {
                    ln_k: &mut ln_k,
                    dh: &mut dh,
                },
            )
            .unwrap();
        let expect = -(-50_000.0 + 400.0 * 100.0) / (GAS_CONSTANT * 400.0);
        assert!((ln_k[0] - expect).abs() < 1e-12, "{} vs {expect}", ln_k[0]);
        assert!(ln_k[1].abs() < 1e-12);
        assert!((dh[0] + 50_000.0).abs() < 1e-8);
        assert!(ln_k[2].is_nan() && ln_k[3].is_nan() && dh[2].is_nan());
    }

    #[test]
    fn large_batches_agree_with_small_ones() {
        // The parallel path (more than one chunk) gives the same bits.
        let table = ThermoTable::new(
            vec![diatomic(-110_530.0, 197.66), diatomic(0.0, 130.68)],
            vec![1.0, -1.0],
            vec![0.5],
        )
        .unwrap();
        let temps: Vec<f64> = (0..10_000).map(|k| 300.0 + 0.1 * k as f64).collect();
        let (mut big, mut dh) = (vec![0.0; temps.len()], vec![0.0; temps.len()]);
        table
            .evaluate(
                &temps,
                ThermoOutputs {
                    ln_k: &mut big,
                    dh: &mut dh,
                },
            )
            .unwrap();
        for (k, &t) in temps.iter().enumerate().step_by(997) {
            let (mut one, mut dh1) = ([0.0], [0.0]);
            table
                .evaluate(
                    &[t],
                    ThermoOutputs {
                        ln_k: &mut one,
                        dh: &mut dh1,
                    },
                )
                .unwrap();
            assert_eq!(one[0].to_bits(), big[k].to_bits());
        }
    }

    #[test]
    fn a_scaled_segment_equals_its_formula_in_tau() {
        // The module's defining formulas with tau = T / 1000 (Shomate's form),
        // evaluated directly: folding the scale into the coefficients keeps them.
        let g = Segment {
            upto: f64::INFINITY,
            closed: false,
            scale: 1000.0,
            a: [3.6, 6.6, -4.05, 0.96, 0.1],
            e: -0.016,
            h: -48_500.0,
            s: 27.5,
        };
        let data = SpeciesThermo::new(vec![g.clone()]).unwrap();
        for t in [300.0, 812.5, 1000.0, 2750.0] {
            let x: f64 = t / g.scale;
            let a = g.a;
            let cp = a[0]
                + a[1] * x
                + a[2] * x * x
                + a[3] * x.powi(3)
                + a[4] * x.powi(4)
                + g.e / (x * x);
            let h = g.scale
                * (a[0] * x
                    + a[1] * x * x / 2.0
                    + a[2] * x.powi(3) / 3.0
                    + a[3] * x.powi(4) / 4.0
                    + a[4] * x.powi(5) / 5.0
                    - g.e / x)
                + g.h;
            let s = a[0] * x.ln()
                + a[1] * x
                + a[2] * x * x / 2.0
                + a[3] * x.powi(3) / 3.0
                + a[4] * x.powi(4) / 4.0
                - g.e / (2.0 * x * x)
                + g.s;
            let (h_got, s_got) = data.h_s(t);
            assert!(
                (data.cp(t) - cp).abs() < 1e-13 * cp.abs().max(1.0),
                "cp at {t}"
            );
            assert!(
                (h_got - h).abs() < 1e-12 * h.abs(),
                "h at {t}: {h_got} vs {h}"
            );
            assert!(
                (s_got - s).abs() < 1e-13 * s.abs().max(1.0),
                "s at {t}: {s_got} vs {s}"
            );
        }
    }

    #[test]
    fn species_values_are_the_data_sets_enthalpy_and_heat_capacity() {
        let co = diatomic(-110_530.0, 197.66);
        let table = ThermoTable::new(vec![co.clone()], vec![], vec![]).unwrap();
        let (mut h, mut cp) = (vec![0.0; 3], vec![0.0; 3]);
        table
            .species(&[500.0, 900.0, -1.0], &mut h, &mut cp)
            .unwrap();
        // constant Cp = 7/2 R: H(T) = H298 + Cp (T - 298.15)
        assert!((h[1] - (-110_530.0 + 3.5 * GAS_CONSTANT * (900.0 - 298.15))).abs() < 1e-8);
        assert_eq!(cp[0], 3.5 * GAS_CONSTANT);
        assert!(h[2].is_nan() && cp[2].is_nan());
    }

    #[test]
    fn many_ranges_are_found_by_binary_search_as_by_a_scan() {
        // 40 open ranges of Cp/R = k on [10k, 10(k+1)): the one found is the
        // one a linear scan finds, at every end and between.
        let ranges: Vec<Segment> = (0..40)
            .map(|k| Segment {
                upto: if k == 39 {
                    f64::INFINITY
                } else {
                    10.0 * (k + 1) as f64
                },
                closed: false,
                scale: 1.0,
                a: [k as f64, 0.0, 0.0, 0.0, 0.0],
                e: 0.0,
                h: 0.0,
                s: 0.0,
            })
            .collect();
        let data = SpeciesThermo::new(ranges).unwrap();
        for t in [0.5f64, 9.999, 10.0, 10.5, 155.0, 389.9, 390.0, 1e6] {
            let expect = ((t / 10.0).floor() as usize).min(39) as f64;
            assert_eq!(data.cp(t), expect, "at {t}");
        }
    }
}
