//! The Koren triode model and a single-ended output stage on its load line.
//!
//! Koren, "Improved VT models for SPICE simulations", Glass Audio 8(5), 1996 (REFERENCES.md):
//! `E1 = (Vp / kp) ln(1 + exp(kp (1/mu + Vg / sqrt(kvb + Vp^2))))`, `Ip = E1^ex / kg1` for `E1 > 0`.
//! Koren's SPICE form is `Ip = (E1^ex + |E1|^ex) / kg1`, that is `2 E1^ex / kg1` for `E1 > 0`, in
//! amperes with volts in (for the published 12AX7 set: about 1 mA at 250 V, -2 V).

use serde::{Deserialize, Serialize};

/// Koren's parameters.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Triode {
    pub mu: f64,
    pub ex: f64,
    pub kg1: f64,
    pub kp: f64,
    pub kvb: f64,
}

impl Triode {
    /// Plate current in amperes at grid voltage `vg` and plate voltage `vp` (both re cathode).
    pub fn plate_current(&self, vg: f64, vp: f64) -> f64 {
        if vp <= 0.0 {
            return 0.0;
        }
        let x = self.kp * (1.0 / self.mu + vg / (self.kvb + vp * vp).sqrt());
        // ln(1 + e^x) without overflow
        let softplus = if x > 30.0 { x } else { x.exp().ln_1p() };
        let e1 = vp / self.kp * softplus;
        if e1 <= 0.0 {
            0.0
        } else {
            2.0 * e1.powf(self.ex) / self.kg1
        }
    }

    /// Transconductance dIp/dVg (A/V), by central difference.
    pub fn gm(&self, vg: f64, vp: f64) -> f64 {
        let h = 1e-4;
        (self.plate_current(vg + h, vp) - self.plate_current(vg - h, vp)) / (2.0 * h)
    }

    /// Plate resistance dVp/dIp (ohm), by central difference.
    pub fn rp(&self, vg: f64, vp: f64) -> f64 {
        let h = 1e-3;
        2.0 * h / (self.plate_current(vg, vp + h) - self.plate_current(vg, vp - h))
    }
}

/// A single-ended stage: the triode with its plate fed through an output transformer from `b_plus`
/// (the primary's DC resistance neglected), biased at `bias_v` on the grid, driving an AC load of
/// `reflected_ohms` on the primary.
#[derive(Debug, Clone, Copy)]
pub struct LoadLine {
    pub triode: Triode,
    pub b_plus_v: f64,
    pub bias_v: f64,
    pub reflected_ohms: f64,
}

impl LoadLine {
    /// Quiescent plate current.
    pub fn idle_current(&self) -> f64 {
        self.triode.plate_current(self.bias_v, self.b_plus_v)
    }

    /// Plate current at grid voltage `vg`: the solution of `Ip = f(vg, B+ - (Ip - Iq) R)` on the
    /// AC load line, by bisection (the right side falls as Ip rises, so there is one root).
    pub fn current(&self, vg: f64) -> f64 {
        let iq = self.idle_current();
        let r = self.reflected_ohms;
        let g = |ip: f64| ip - self.triode.plate_current(vg, self.b_plus_v - (ip - iq) * r);
        // The plate cannot swing below zero volts: the current is at most (B+ / R) + Iq.
        let (mut lo, mut hi) = (0.0, self.b_plus_v / r + iq);
        if g(lo) >= 0.0 {
            return 0.0;
        }
        for _ in 0..80 {
            let mid = 0.5 * (lo + hi);
            if g(mid) < 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }

    /// Primary AC voltage (volts) at grid voltage `vg`: `(Ip - Iq) R`, positive when the current
    /// rises (the transformer is wired so the stage does not invert).
    pub fn primary_voltage(&self, vg: f64) -> f64 {
        (self.current(vg) - self.idle_current()) * self.reflected_ohms
    }
}
