//! pollard: passive cable maps and strict binary compartment reduction of reconstructed neurons.
//!
//! Data flows one way: SWC text ([`swc`]) → tree ([`morphology`], petgraph) → flat arrays
//! ([`morphology::Flat`]) → cable maps ([`cable`]) → reduced tree ([`reduce`]) → files
//! ([`export`]) and views (`app`, behind the `gui` feature). See DEVELOPERS.md for the map.

pub mod batch;
pub mod cable;
pub mod export;
pub mod fidelity;
pub mod lab;
pub mod morphology;
pub mod neuroml;
pub mod reduce;
pub mod samples;
pub mod swc;
pub mod synapses;
pub mod synth;
pub mod transient;

pub use morphology::{Flat, Morphology};
pub use swc::{SwcError, Warning};

#[cfg(feature = "gui")]
pub mod app;
