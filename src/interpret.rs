//! Interpretation of a measured SDAS: the power laws that tie lambda2 to the
//! cooling rate (lambda2 = A x CR^-n) and to the local solidification time
//! (lambda2 = B x t_f^m), and their inversion with confidence bounds.
//!
//! Both forms are `lambda2 = coefficient x x^exponent` with a positive
//! coefficient and a non-zero exponent; a measured lambda2 is inverted as
//! x = (lambda2 / coefficient)^(1 / exponent). The inverse is monotonic, so a
//! confidence interval of lambda2 maps to one of x by transforming its bounds
//! (swapped when the exponent is negative). The published correlations that
//! supply the coefficients live in the correlation library.

use crate::units::Micrometres;

/// lambda2 [um] = coefficient x x^exponent, x in the law's own unit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PowerLaw {
    pub coefficient: f64,
    pub exponent: f64,
}

impl PowerLaw {
    pub fn new(coefficient: f64, exponent: f64) -> Result<Self, String> {
        if !(coefficient.is_finite() && coefficient > 0.0) {
            return Err(format!(
                "coefficient {coefficient} must be a positive number"
            ));
        }
        if !(exponent.is_finite() && exponent != 0.0) {
            return Err(format!("exponent {exponent} must be a non-zero number"));
        }
        Ok(Self {
            coefficient,
            exponent,
        })
    }

    /// lambda2 predicted at x (x > 0).
    pub fn predict(&self, x: f64) -> Option<Micrometres> {
        (x.is_finite() && x > 0.0).then(|| Micrometres(self.coefficient * x.powf(self.exponent)))
    }

    /// x at which the law gives `lambda2`.
    pub fn invert(&self, lambda2: Micrometres) -> Option<f64> {
        let l = lambda2.0;
        (l.is_finite() && l > 0.0).then(|| (l / self.coefficient).powf(1.0 / self.exponent))
    }

    /// Interval of x for an interval of lambda2, lower bound first.
    pub fn invert_interval(&self, low: Micrometres, high: Micrometres) -> Option<[f64; 2]> {
        let a = self.invert(low)?;
        let b = self.invert(high)?;
        Some(if a <= b { [a, b] } else { [b, a] })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn forward_then_inverse_round_trips() {
        for (c, e) in [
            (50.0, -1.0 / 3.0),
            (7.5, 0.39),
            (97.0, -0.4935),
            (35.5, -0.31),
        ] {
            let law = PowerLaw::new(c, e).expect("valid in this test");
            for x in [0.01, 0.7, 1.0, 12.0, 3000.0] {
                let l = law.predict(x).expect("valid in this test");
                let back = law.invert(l).expect("valid in this test");
                assert!((back / x - 1.0).abs() < 1e-12, "{c} {e} {x}: {back}");
            }
        }
    }

    #[test]
    fn interval_bounds_are_ordered_and_amplified_by_the_exponent() {
        // lambda2 = B t^(1/3): a +-10 % interval of lambda2 spans
        // (1.1/0.9)^3 = 1.826 in t_f (algebra of the power law).
        let law = PowerLaw::new(10.0, 1.0 / 3.0).expect("valid in this test");
        let [lo, hi] = law
            .invert_interval(Micrometres(36.0), Micrometres(44.0))
            .expect("valid in this test");
        assert!(lo < hi);
        assert!((hi / lo - (44.0f64 / 36.0).powi(3)).abs() < 1e-9);
        // A negative exponent (cooling rate) swaps the bounds.
        let law = PowerLaw::new(50.0, -1.0 / 3.0).expect("valid in this test");
        let [lo, hi] = law
            .invert_interval(Micrometres(36.0), Micrometres(44.0))
            .expect("valid in this test");
        assert!(lo < hi && law.invert(Micrometres(44.0)).expect("valid in this test") == lo);
    }

    #[test]
    fn rejects_unusable_laws() {
        assert!(PowerLaw::new(0.0, 0.3).is_err());
        assert!(PowerLaw::new(5.0, 0.0).is_err());
        assert!(PowerLaw::new(f64::NAN, 0.3).is_err());
        let law = PowerLaw::new(5.0, 0.3).expect("valid in this test");
        assert!(law.invert(Micrometres(-1.0)).is_none());
        assert!(law.predict(0.0).is_none());
    }
}
