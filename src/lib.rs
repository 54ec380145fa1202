//! glitchbook: find noise transients in gravitational-wave detector data,
//! sort them into families, track their rates and trace their witnesses.
//!
//! Data flow, one module a stage: [`io`] → [`condition`] → [`tf`] →
//! [`trigger`] → [`scan`] → [`catalogue`] → families → coupling → rates → report.
#![deny(missing_docs)]

pub mod catalogue;
pub mod clusters;
pub mod condition;
pub mod coupling;
pub mod demo;
pub mod error;
pub mod families;
pub mod gpstime;
pub mod io;
pub mod maps;
pub mod output;
pub mod pipeline;
pub mod plan;
pub mod rates;
pub mod report;
pub mod scan;
pub mod scenario;
pub mod segments;
pub mod tails;
pub mod tf;
pub mod trigger;
pub mod waveforms;

pub use error::{Error, Result};
