//! The static HTML report: [`ReportData`] is gathered from the catalogue
//! ([`gather`]) and rendered by [`write_report`] to `DIR/index.html` plus
//! `DIR/img/*.svg` (and any spectrogram PNGs the caller passes in). The site
//! is self-contained: no network, no JavaScript.
//!
//! All user text (labels, notes, channel names, parameters) is HTML-escaped
//! ([`html_escape`]). Every page states the catalogue, parameters and tool
//! version it was made from. Veto proposals always carry [`VETO_CAUTION`]
//! and their safety figures. The command writes through [`Staging`]: into a
//! fresh directory, then renamed into place, never through a planted link.

mod gather;
mod html;
pub mod plots;
mod staging;

pub use gather::{
    gather, ExampleTrigger, FamilyInfo, LagRow, ProposalRow, ReportData, ReportParams, VetoRow,
    WitnessRow,
};
pub use html::{html_escape, write_report};
pub use staging::Staging;

/// The caution printed with every veto proposal (the one of
/// [`crate::coupling`]).
pub use crate::coupling::VETO_CAUTION;
