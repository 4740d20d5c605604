//! Which captures a batch processes: command-line paths, directories, glob
//! patterns and list files expanded into one sorted list, and the slice of it
//! that one shard (one Slurm array task) takes.

use anyhow::{anyhow, bail, Context, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// File endings taken from a directory.
const CAPTURE_ENDINGS: [&str; 3] = ["h5", "hdf5", "he5"];

fn is_capture(path: &Path) -> bool {
    path.extension().and_then(|e| e.to_str()).is_some_and(|e| CAPTURE_ENDINGS.contains(&e.to_ascii_lowercase().as_str()))
}

/// Expands paths (files kept as given, even missing ones, so they fail as
/// captures), directories (their capture files, not recursive) and glob
/// patterns, plus the lines of a list file; sorted, without duplicates.
pub fn expand(args: &[PathBuf], list: Option<&Path>) -> Result<Vec<PathBuf>> {
    let mut items: Vec<PathBuf> = args.to_vec();
    if let Some(list) = list {
        let text = std::fs::read_to_string(list).with_context(|| format!("reading list {}", list.display()))?;
        items.extend(
            text.lines()
                .map(str::trim)
                .filter(|l| !l.is_empty() && !l.starts_with('#'))
                .map(PathBuf::from),
        );
    }
    let mut out = Vec::new();
    for item in items {
        let text = item.to_string_lossy().into_owned();
        if item.is_dir() {
            let mut found: Vec<PathBuf> = std::fs::read_dir(&item)
                .with_context(|| format!("reading directory {}", item.display()))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.is_file() && is_capture(p))
                .collect();
            if found.is_empty() {
                bail!("directory {} holds no capture files (.h5, .hdf5, .he5)", item.display());
            }
            found.sort();
            out.extend(found);
        } else if !item.exists() && text.contains(['*', '?', '[']) {
            let matches: Vec<PathBuf> = glob::glob(&text)
                .map_err(|e| anyhow!("bad pattern '{text}': {e}"))?
                .filter_map(|m| m.ok())
                .filter(|p| p.is_file())
                .collect();
            if matches.is_empty() {
                bail!("no file matches '{text}'");
            }
            out.extend(matches);
        } else {
            out.push(item);
        }
    }
    out.sort();
    out.dedup();
    Ok(out)
}

/// One of `count` deterministic, balanced slices of a sorted list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    /// 0-based index of this slice.
    pub index: usize,
    pub count: usize,
}

impl Shard {
    pub const WHOLE: Shard = Shard { index: 0, count: 1 };

    /// Parses `I/N` with 0 ≤ I < N.
    pub fn parse(text: &str) -> Result<Shard> {
        let (i, n) = text.split_once('/').ok_or_else(|| anyhow!("--shard takes I/N, found '{text}'"))?;
        let index: usize = i.trim().parse().map_err(|_| anyhow!("--shard index '{i}' is not a whole number"))?;
        let count: usize = n.trim().parse().map_err(|_| anyhow!("--shard count '{n}' is not a whole number"))?;
        Shard::new(index, count)
    }

    pub fn new(index: usize, count: usize) -> Result<Shard> {
        if count == 0 || index >= count {
            bail!("shard {index}/{count}: need 0 <= index < count");
        }
        Ok(Shard { index, count })
    }

    /// The shard of a Slurm array task, from SLURM_ARRAY_TASK_ID and
    /// SLURM_ARRAY_TASK_COUNT (or SLURM_ARRAY_TASK_MIN/MAX); None outside an array.
    pub fn from_env(get: impl Fn(&str) -> Option<String>) -> Result<Option<Shard>> {
        let Some(id) = get("SLURM_ARRAY_TASK_ID") else { return Ok(None) };
        let num = |name: &str| -> Result<Option<usize>> {
            get(name)
                .map(|v| v.trim().parse::<usize>().map_err(|_| anyhow!("{name}='{v}' is not a whole number")))
                .transpose()
        };
        let id: usize = id.trim().parse().map_err(|_| anyhow!("SLURM_ARRAY_TASK_ID='{id}' is not a whole number"))?;
        let min = num("SLURM_ARRAY_TASK_MIN")?.unwrap_or(0);
        let count = match (num("SLURM_ARRAY_TASK_COUNT")?, num("SLURM_ARRAY_TASK_MAX")?) {
            (Some(c), _) => c,
            (None, Some(max)) => max + 1 - min,
            (None, None) => bail!("SLURM_ARRAY_TASK_ID is set but neither SLURM_ARRAY_TASK_COUNT nor SLURM_ARRAY_TASK_MAX is"),
        };
        if id < min {
            bail!("SLURM_ARRAY_TASK_ID {id} is below SLURM_ARRAY_TASK_MIN {min}");
        }
        Shard::new(id - min, count).map(Some)
    }

    /// This shard's slice: items [i·n/N, (i+1)·n/N).
    pub fn select<T: Clone>(&self, items: &[T]) -> Vec<T> {
        let n = items.len();
        items[self.index * n / self.count..(self.index + 1) * n / self.count].to_vec()
    }

    pub fn is_whole(&self) -> bool {
        self.count == 1
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_the_list_exactly_once_and_balanced() {
        for len in [0usize, 1, 2, 7, 8, 23] {
            let items: Vec<usize> = (0..len).collect();
            for n in 1..=5 {
                let mut all = Vec::new();
                let mut sizes = Vec::new();
                for i in 0..n {
                    let part = Shard::new(i, n).unwrap().select(&items);
                    sizes.push(part.len());
                    all.extend(part);
                }
                assert_eq!(all, items, "len {len}, {n} shards");
                assert!(sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1, "{sizes:?}");
            }
        }
    }

    #[test]
    fn shard_from_slurm_environment() {
        let env = |pairs: &'static [(&'static str, &'static str)]| move |k: &str| pairs.iter().find(|(n, _)| *n == k).map(|(_, v)| v.to_string());
        assert_eq!(Shard::from_env(env(&[])).unwrap(), None);
        assert_eq!(Shard::from_env(env(&[("SLURM_ARRAY_TASK_ID", "2"), ("SLURM_ARRAY_TASK_COUNT", "4")])).unwrap(), Some(Shard { index: 2, count: 4 }));
        assert_eq!(
            Shard::from_env(env(&[("SLURM_ARRAY_TASK_ID", "3"), ("SLURM_ARRAY_TASK_MIN", "1"), ("SLURM_ARRAY_TASK_MAX", "4")])).unwrap(),
            Some(Shard { index: 2, count: 4 })
        );
        assert!(Shard::from_env(env(&[("SLURM_ARRAY_TASK_ID", "1")])).is_err());
        assert!(Shard::parse("3/3").is_err() && Shard::parse("a/3").is_err());
        assert_eq!(Shard::parse("1/3").unwrap(), Shard { index: 1, count: 3 });
    }
}
