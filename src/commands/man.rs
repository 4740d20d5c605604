//! `fringeflow man`: the man pages (roff), printed or written to a folder.

use std::path::Path;
use std::process::ExitCode;

use super::fail;
use crate::cli::ManArgs;

pub fn command(a: ManArgs, quiet: bool) -> ExitCode {
    man(a.out_dir.as_deref(), quiet)
}

fn man(out_dir: Option<&Path>, quiet: bool) -> ExitCode {
    let cmd = crate::cli::command();
    let render = |c: clap::Command| -> std::io::Result<Vec<u8>> {
        let mut buf = Vec::new();
        clap_mangen::Man::new(c).render(&mut buf)?;
        Ok(buf)
    };
    let Some(dir) = out_dir else {
        return match render(cmd) {
            Ok(b) => {
                out!("{}", String::from_utf8_lossy(&b));
                ExitCode::SUCCESS
            }
            Err(e) => fail(1, e),
        };
    };
    if let Err(e) = std::fs::create_dir_all(dir) {
        return fail(1, format!("creating {}: {e}", dir.display()));
    }
    let mut cmd = cmd;
    cmd.build();
    let mut pages: Vec<(String, clap::Command)> = vec![("fringeflow.1".into(), cmd.clone())];
    for sub in cmd.get_subcommands() {
        let name = format!("fringeflow-{}", sub.get_name());
        pages.push((format!("{name}.1"), sub.clone().name(name)));
    }
    for (file, c) in pages {
        let path = dir.join(&file);
        let written = render(c).map_err(anyhow::Error::from).and_then(|b| fringeflow::io::staging::write_atomically(&path, |tmp| Ok(std::fs::write(tmp, &b)?)));
        if let Err(e) = written {
            return fail(1, format!("{}: {e:#}", path.display()));
        }
        if !quiet {
            errln!("wrote {}", path.display());
        }
    }
    ExitCode::SUCCESS
}
