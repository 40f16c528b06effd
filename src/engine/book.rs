//! The loan-book hook: what the settlement step reports, loan by loan, when a caller asks for a
//! synthetic loan book (`run --loan-book`).
//!
//! Why a hook and not a tally: a book has one row per member loan, far too many to keep, so the
//! engine hands each loan to a sink that streams it out. Normal runs pass no sink, and the engine
//! then skips the recording entirely (one test per village and cycle), so their draws, results and
//! speed are those of a run without the hook.

/// One member loan of a counted cycle, as the settlement step books it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoanRecord {
    /// Cycle, numbered from 1 including the warm-up (as stress windows and the time series are).
    pub cycle: u32,
    /// Village index, 0-based (slot j lives in village j % V).
    pub village: u32,
    /// The group's number within its village in this cycle, 0-based.
    pub group: u32,
    /// The member's slot number in the scenario, 0-based.
    pub slot: u32,
    /// Which occupant of the slot she is, 0-based (a replacement after a departure is the next).
    pub entrant: u32,
    /// Amount due, D = P (1 + r).
    pub due: f64,
    /// What the lender received for this loan: her own payment plus the peers' cover allocated to
    /// it. A repaid group pays every loan in full; a defaulted group's cover is shared among its
    /// short members in proportion to their shortfalls, so the loans sum to the group's collection.
    pub paid: f64,
    /// What she paid herself, min(C, D).
    pub own_paid: f64,
}

/// Receives the loans of counted cycles, in the engine's order (cycle, village, group, member).
pub trait LoanBookSink {
    /// Takes one loan.
    fn loan(&mut self, loan: &LoanRecord);
}
