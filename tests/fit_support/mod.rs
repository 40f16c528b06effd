//! A loan-book generator for the calibration tests: a direct simulation of the one-factor clustered
//! model, written independently of the engine so that a round trip checks the fit and nothing else.
//!
//! Each village-cycle draws its factor m ~ N(0, 1); each member of a group of k draws e ~ N(0, 1)
//! and fails iff sqrt(rho) m + sqrt(1 - rho) e < Phi^-1(phi(k)). Nobody covers anybody (peer cover
//! 0), so a group repays iff none of its members fails. Village v keeps one group size,
//! `sizes[v % sizes.len()]`, the way a book written from several simulated arms has independent
//! villages per size.
#![allow(dead_code)]

use loancycle::analytic::normal;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use std::fmt::Write as _;

/// What to simulate.
pub struct BookSpec<'a> {
    /// Villages.
    pub villages: u32,
    /// Cycles, numbered from 1.
    pub cycles: u32,
    /// Groups per village-cycle.
    pub groups: u32,
    /// Group sizes, assigned to villages in turn.
    pub sizes: &'a [u32],
    /// The true per-member failure probability at each size.
    pub phi: &'a dyn Fn(u32) -> f64,
    /// Correlation of members of one village-cycle.
    pub rho: f64,
    /// Seed; village-cycle (v, t) draws from its own ChaCha stream.
    pub seed: u64,
}

/// Amount due per loan in the generated books.
pub const DUE: f64 = 120.0;

/// The loan book as CSV text (header included).
pub fn loan_book(spec: &BookSpec) -> String {
    let mut out = String::from("cycle,village,group,member,due,paid\n");
    let (a, b) = (spec.rho.sqrt(), (1.0 - spec.rho).sqrt());
    for v in 0..spec.villages {
        let k = spec.sizes[v as usize % spec.sizes.len()];
        let threshold = normal::inv_cdf((spec.phi)(k));
        for t in 1..=spec.cycles {
            let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
            rng.set_stream((u64::from(v) << 32) | u64::from(t));
            let m: f64 = rng.sample(StandardNormal);
            for g in 0..spec.groups {
                for j in 0..k {
                    let e: f64 = rng.sample(StandardNormal);
                    let paid = if a * m + b * e < threshold { 0.35 * DUE } else { DUE };
                    let member = g * k + j;
                    let _ = writeln!(
                        out,
                        "{t},hamlet-{v:03},c{t}-h{v:03}-g{g},h{v:03}-m{member},{DUE},{paid}"
                    );
                }
            }
        }
    }
    out
}
