//! ngspice's binary raw output (`ngspice -b -r FILE`): one or more plots, each a text header
//! (`Title:`, `Plotname:`, `Flags: real|complex`, `No. Variables:`, `No. Points:`, `Variables:`
//! with one `index name type` line each) then `Binary:` and the points, each the variables'
//! values as little-endian 64-bit floats (two per value, real and imaginary, in a complex plot).
//!
//! Hand-written: the crates that read raw files read the ASCII form only, and the binary one is
//! a few dozen lines. Everything in it is checked (counts, lengths, finite values), since a
//! simulator that stopped half way leaves a file shorter than its header says.

use crate::error::{Error, Result};
use realfft::num_complex::Complex64;

/// One analysis's results.
#[derive(Debug, Clone, PartialEq)]
pub struct Plot {
    /// `AC Analysis`, `Transient Analysis`, ...
    pub name: String,
    /// Variable names as ngspice gives them, lower case (`time`, `frequency`, `v(out)`).
    pub variables: Vec<String>,
    /// Each variable's values, one per point (real plots: the imaginary parts are 0).
    pub values: Vec<Vec<Complex64>>,
}

impl Plot {
    /// A variable's values by name (case-insensitive), or an error naming what there is.
    pub fn variable(&self, name: &str) -> Result<&[Complex64]> {
        let i = self
            .variables
            .iter()
            .position(|v| v.eq_ignore_ascii_case(name))
            .ok_or_else(|| Error::Spice {
                detail: format!(
                    "ngspice's {} holds no `{name}` (it holds {})",
                    self.name,
                    self.variables.join(", ")
                ),
            })?;
        Ok(&self.values[i])
    }

    /// A variable's real parts.
    pub fn real(&self, name: &str) -> Result<Vec<f64>> {
        Ok(self.variable(name)?.iter().map(|c| c.re).collect())
    }
}

fn bad(why: impl Into<String>) -> Error {
    Error::Spice {
        detail: format!("ngspice's raw output is not readable: {}", why.into()),
    }
}

/// Every plot in `bytes`, in the order ngspice wrote them.
pub fn parse(bytes: &[u8]) -> Result<Vec<Plot>> {
    let mut plots = Vec::new();
    let mut at = 0;
    while at < bytes.len() {
        // Skip blank padding between plots.
        if bytes[at].is_ascii_whitespace() {
            at += 1;
            continue;
        }
        let (plot, next) = parse_one(bytes, at)?;
        plots.push(plot);
        at = next;
    }
    if plots.is_empty() {
        return Err(bad("it is empty"));
    }
    Ok(plots)
}

/// One plot starting at `start`; returns it and where the next begins.
fn parse_one(bytes: &[u8], start: usize) -> Result<(Plot, usize)> {
    const MARK: &[u8] = b"Binary:\n";
    let rel = bytes[start..]
        .windows(MARK.len())
        .position(|w| w == MARK)
        .ok_or_else(|| {
            bad("no `Binary:` section (an ASCII raw file? ampnote reads the binary form)")
        })?;
    let header = std::str::from_utf8(&bytes[start..start + rel])
        .map_err(|_| bad("its header is not text"))?;
    let data = start + rel + MARK.len();
    let field = |key: &str| {
        header
            .lines()
            .find_map(|l| l.strip_prefix(key))
            .map(str::trim)
    };
    let name = field("Plotname:").unwrap_or("").to_string();
    let complex = match field("Flags:") {
        Some(f) if f.contains("complex") => true,
        Some(f) if f.contains("real") => false,
        other => return Err(bad(format!("unknown flags {other:?}"))),
    };
    let count = |key: &str| -> Result<usize> {
        field(key)
            .and_then(|v| v.parse().ok())
            .ok_or_else(|| bad(format!("no number after `{key}`")))
    };
    let n_vars = count("No. Variables:")?;
    let n_points = count("No. Points:")?;
    if n_vars == 0 || n_vars > 100_000 {
        return Err(bad(format!("{n_vars} variables")));
    }
    let var_lines: Vec<&str> = header
        .lines()
        .skip_while(|l| !l.starts_with("Variables:"))
        .skip(1)
        .take(n_vars)
        .collect();
    if var_lines.len() != n_vars {
        return Err(bad(format!(
            "{n_vars} variables announced, {} listed",
            var_lines.len()
        )));
    }
    let variables: Vec<String> = var_lines
        .iter()
        .map(|l| {
            l.split_whitespace()
                .nth(1)
                .map(str::to_ascii_lowercase)
                .ok_or_else(|| bad(format!("a variable line without a name: {l:?}")))
        })
        .collect::<Result<_>>()?;
    let per_value = if complex { 16 } else { 8 };
    let need = n_points
        .checked_mul(n_vars)
        .and_then(|v| v.checked_mul(per_value))
        .ok_or_else(|| bad("its point count overflows"))?;
    let end = data + need;
    if end > bytes.len() {
        return Err(bad(format!(
            "the {name} promises {n_points} points but the file ends after {} (the simulator stopped?)",
            (bytes.len() - data) / (per_value * n_vars)
        )));
    }
    let f = |i: usize| {
        f64::from_le_bytes(
            bytes[data + 8 * i..data + 8 * i + 8]
                .try_into()
                .expect("eight bytes"),
        )
    };
    let mut values = vec![Vec::with_capacity(n_points); n_vars];
    for p in 0..n_points {
        for (v, column) in values.iter_mut().enumerate() {
            let k = p * n_vars + v;
            let c = if complex {
                Complex64::new(f(2 * k), f(2 * k + 1))
            } else {
                Complex64::new(f(k), 0.0)
            };
            if !(c.re.is_finite() && c.im.is_finite()) {
                return Err(bad(format!(
                    "{} at point {p} of the {name} is not a finite number",
                    variables[v]
                )));
            }
            column.push(c);
        }
    }
    Ok((
        Plot {
            name,
            variables,
            values,
        },
        end,
    ))
}
