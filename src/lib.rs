//! glitchbook: find noise transients in gravitational-wave detector data,
//! sort them into families, track their rates and trace their witnesses.
//!
//! Data flow, one module a stage: [`io`] → [`condition`] → [`tf`] →
//! [`trigger`] → [`scan`] → [`catalogue`] → families → coupling → rates → report.
#![deny(missing_docs)]

pub mod catalogue;
pub mod condition;
pub mod io;
pub mod plan;
pub mod scan;
pub mod segments;
pub mod tf;
pub mod trigger;
