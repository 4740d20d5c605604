//! Pipelines: the settings file ([`config`]) and the planner that turns it
//! into precomputed stages and runs frames through them ([`plan`]).

pub mod config;
pub mod defaults;
pub mod fused;
pub mod kernel;
pub mod plan;
