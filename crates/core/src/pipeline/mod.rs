//! Pipelines: the settings file ([`config`]) and the planner that turns it
//! into precomputed stages and runs frames through them ([`plan`]), the
//! per-sample and per-depth factors both engines share ([`factor`]), and
//! the fused fast path built from a plan ([`fused`]: it uses the plan, the
//! plan never uses it).

pub mod config;
pub mod defaults;
pub mod factor;
pub mod fused;
pub mod kernel;
pub mod plan;
