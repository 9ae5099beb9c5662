//! Host harness for the `flatbin` OFDM core: scenarios, channel and noise generation, the
//! published closed forms the core is checked against, link simulation and reports.
//!
//! `main.rs` is thin: every subcommand is a library function here that tests call directly.

pub mod channel;
pub mod characterise;
pub mod coded_link;
pub mod coded_ofdm;
pub mod coding_ref;
pub mod estimator_model;
pub mod evaluate;
pub mod evaluate_fading;
pub mod fading_link;
pub mod impair;
pub mod link;
pub mod link_survey;
pub mod noise;
pub mod plots;
pub mod rng;
pub mod rx_chain;
pub mod scenario;
pub mod simd;
pub mod theory;
