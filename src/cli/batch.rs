//! Arguments of the batch and cluster commands: summarize and slurm-script.

use clap::Args;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct SummarizeArgs {
    /// An output folder of `run` (holding batch.json or batch-I-of-N.json).
    #[arg(value_name = "DIR")]
    pub dir: PathBuf,
    /// Print the merged summary as JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct SlurmScriptArgs {
    /// File listing the captures, one per line.
    #[arg(long, value_name = "FILE")]
    pub list: PathBuf,
    /// Pipeline file (TOML) every task uses.
    #[arg(long, short, value_name = "FILE")]
    pub pipeline: PathBuf,
    /// Output directory of the batch (and of the task logs).
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Array tasks (each takes one balanced slice of the list).
    #[arg(long, default_value_t = 4)]
    pub tasks: usize,
    /// CPUs per array task (its thread count).
    #[arg(long, default_value_t = 2)]
    pub cpus_per_task: usize,
    /// Memory per task, in Slurm's syntax.
    #[arg(long, default_value = "2G")]
    pub mem: String,
    /// Time limit per task, in Slurm's syntax.
    #[arg(long, default_value = "04:00:00")]
    pub time: String,
    /// Slurm partition (the cluster's default when omitted).
    #[arg(long)]
    pub partition: Option<String>,
    /// Job name shown by squeue.
    #[arg(long, default_value = "fringeflow")]
    pub job_name: String,
}
