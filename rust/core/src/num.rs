//! The number types the Newton iteration is written over: one case (`f64`)
//! or a lane group of `L` cases (`[f64; L]`: [`LANES`] in the vector kernels,
//! one where a call has too few cases to fill them), so that the Hessian,
//! the linear solve and the residuals are written once for the general
//! path, the vector lanes and the sensitivities ([`crate::newton`]).
//!
//! A lane group's operation is a loop over its lanes with no branches, which
//! the compiler turns into vector instructions; a comparison gives one flag
//! per lane, and [`Num::select`] picks per lane, so that a lane's arithmetic
//! never mixes with another's. (Plain arrays rather than a wrapper type: the
//! lane kernel's own loops index them directly, and the compiler vectorises
//! those best.)

/// Cases per lane group of the vector kernels.
pub const LANES: usize = 8;

/// A lane group of cases.
pub type Lanes = [f64; LANES];

/// Arithmetic on one case or a lane group of cases.
pub trait Num: Copy {
    /// One flag per case.
    type Mask: Copy;

    /// Every case the same value.
    fn splat(value: f64) -> Self;
    fn add(self, other: Self) -> Self;
    fn sub(self, other: Self) -> Self;
    fn mul(self, other: Self) -> Self;
    fn div(self, other: Self) -> Self;
    /// `self * c` for a coefficient shared by every case.
    fn scale(self, c: f64) -> Self;
    /// `self + a * b` with `b` shared by every case.
    fn add_scaled(self, a: Self, b: f64) -> Self;
    /// Per case: `self > bound * reference`, and `self` finite.
    fn clearly_above(self, bound: f64, reference: Self) -> Self::Mask;
    /// Per case: `if mask { yes } else { no }`.
    fn select(mask: Self::Mask, yes: Self, no: Self) -> Self;
    /// Per case: `a && b`.
    fn both(a: Self::Mask, b: Self::Mask) -> Self::Mask;
}

impl Num for f64 {
    type Mask = bool;

    #[inline(always)]
    fn splat(value: f64) -> Self {
        value
    }

    #[inline(always)]
    fn add(self, other: Self) -> Self {
        self + other
    }

    #[inline(always)]
    fn sub(self, other: Self) -> Self {
        self - other
    }

    #[inline(always)]
    fn mul(self, other: Self) -> Self {
        self * other
    }

    #[inline(always)]
    fn div(self, other: Self) -> Self {
        self / other
    }

    #[inline(always)]
    fn scale(self, c: f64) -> Self {
        self * c
    }

    #[inline(always)]
    fn add_scaled(self, a: Self, b: f64) -> Self {
        self + a * b
    }

    #[inline(always)]
    fn clearly_above(self, bound: f64, reference: Self) -> bool {
        self > bound * reference && self <= f64::MAX
    }

    #[inline(always)]
    fn select(mask: bool, yes: Self, no: Self) -> Self {
        if mask {
            yes
        } else {
            no
        }
    }

    #[inline(always)]
    fn both(a: bool, b: bool) -> bool {
        a && b
    }
}

/// A lane-by-lane loop producing a lane group.
macro_rules! each_lane {
    (|$l:ident| $value:expr) => {
        std::array::from_fn(|$l| $value)
    };
}

impl<const L: usize> Num for [f64; L] {
    type Mask = [bool; L];

    #[inline(always)]
    fn splat(value: f64) -> Self {
        [value; L]
    }

    #[inline(always)]
    fn add(self, other: Self) -> Self {
        each_lane!(|l| self[l] + other[l])
    }

    #[inline(always)]
    fn sub(self, other: Self) -> Self {
        each_lane!(|l| self[l] - other[l])
    }

    #[inline(always)]
    fn mul(self, other: Self) -> Self {
        each_lane!(|l| self[l] * other[l])
    }

    #[inline(always)]
    fn div(self, other: Self) -> Self {
        each_lane!(|l| self[l] / other[l])
    }

    #[inline(always)]
    fn scale(self, c: f64) -> Self {
        each_lane!(|l| self[l] * c)
    }

    #[inline(always)]
    fn add_scaled(self, a: Self, b: f64) -> Self {
        each_lane!(|l| self[l] + a[l] * b)
    }

    #[inline(always)]
    fn clearly_above(self, bound: f64, reference: Self) -> [bool; L] {
        let mut out = [false; L];
        for l in 0..L {
            out[l] = self[l] > bound * reference[l] && self[l] <= f64::MAX;
        }
        out
    }

    #[inline(always)]
    fn select(mask: [bool; L], yes: Self, no: Self) -> Self {
        each_lane!(|l| if mask[l] { yes[l] } else { no[l] })
    }

    #[inline(always)]
    fn both(a: [bool; L], b: [bool; L]) -> [bool; L] {
        let mut out = [false; L];
        for l in 0..L {
            out[l] = a[l] && b[l];
        }
        out
    }
}
