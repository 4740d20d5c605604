//! What fringeflow says on its standard streams: one line per warning or
//! error, and writes that never panic (a closed pipe or a full device is
//! ignored rather than aborting the run).

use std::io::Write;

/// `fringeflow: warning: <text>` on stderr.
pub fn warn(text: &str) {
    let _ = writeln!(std::io::stderr(), "fringeflow: warning: {}", one_line(text));
}

/// `fringeflow: error: <text>` on stderr.
pub fn error(text: &str) {
    let _ = writeln!(std::io::stderr(), "fringeflow: error: {}", one_line(text));
}

/// A line on stderr.
pub fn note(text: &str) {
    let _ = writeln!(std::io::stderr(), "{text}");
}

/// Text on stdout (no newline added).
pub fn print(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes());
    let _ = out.flush();
}

/// A line on stdout.
pub fn println(text: &str) {
    print(&format!("{text}\n"));
}

fn one_line(text: &str) -> String {
    text.replace('\n', " ")
}
