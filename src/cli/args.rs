//! The command line's arguments, through clap's derive API: the
//! subcommands, their options, and the parsers of counts and sizes.

use clap::{Args, Parser, Subcommand};

use orrery::{MachineKind, DEFAULT_FUEL, DEFAULT_MEMORY};

/// The most bytes a program's source may have unless `--max-source` says
/// otherwise: 64 MiB.
pub const DEFAULT_MAX_SOURCE: usize = 64 << 20;

/// Run, check and format programs of the orrery kernel calculus.
#[derive(Debug, Parser)]
#[command(name = "orrery", version, about, propagate_version = true)]
#[command(
    after_help = "Exit status: 0 a value, 1 an evaluation error, 2 bad usage, \
3 a syntax or name error, 4 out of fuel, 5 a resource limit, 6 the machines disagree."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run a program and print its outcome.
    Run(RunArgs),
    /// Parse and validate a program: print every unbound name, and the host
    /// functions it uses.
    Check(CheckArgs),
    /// Print a program in canonical form (which parses back to the same term).
    Fmt(CheckArgs),
    /// Read programs line by line, evaluating each.
    Repl(ReplArgs),
    /// Print a completion script for a shell.
    Completions {
        /// The shell: bash, elvish, fish, powershell or zsh.
        shell: clap_complete::Shell,
    },
}

/// Where a program comes from: a file, standard input (`-`), or the text of
/// `-e`.
#[derive(Debug, Args)]
#[group(required = true, multiple = false)]
pub struct Input {
    /// The program's file, or `-` for standard input.
    #[arg(value_name = "FILE")]
    pub file: Option<String>,
    /// The program's text, in place of a file.
    #[arg(short = 'e', long = "eval", value_name = "TEXT")]
    pub eval: Option<String>,
}

/// Options every subcommand that reads programs shares.
#[derive(Debug, Args)]
pub struct Common {
    /// A JSON file of host function stubs (see `--help` of `run`).
    #[arg(long = "host", value_name = "FILE")]
    pub host: Option<String>,
    /// The most bytes a source (or stub file) may have; `KiB`, `MiB`,
    /// `GiB` and `_` allowed.
    #[arg(long = "max-source", value_name = "BYTES", default_value_t = DEFAULT_MAX_SOURCE, value_parser = size)]
    pub max_source: usize,
    /// Print outcomes and errors as JSON objects on stdout, one per line.
    #[arg(long)]
    pub json: bool,
}

/// Resource limits and the machine.
#[derive(Debug, Args)]
pub struct Machine {
    /// The machine: one of those built in, or `all` (every machine,
    /// checking that they agree). Default: the fastest.
    #[arg(long, value_name = "NAME", value_parser = machine_choice)]
    pub machine: Option<MachineChoice>,
    /// Contractions allowed; `_` allowed.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_FUEL, value_parser = count)]
    pub fuel: u64,
    /// Bytes of runtime data allowed; `KiB`, `MiB`, `GiB` and `_` allowed.
    #[arg(long, value_name = "BYTES", default_value_t = DEFAULT_MEMORY, value_parser = size)]
    pub memory: usize,
}

#[derive(Debug, Args)]
#[command(after_help = HOST_HELP)]
pub struct RunArgs {
    #[command(flatten)]
    pub input: Input,
    #[command(flatten)]
    pub machine: Machine,
    #[command(flatten)]
    pub common: Common,
    /// Print each contraction of the stepper (its rule and redex) on stderr.
    #[arg(long)]
    pub trace: bool,
    /// Print wall time, contractions per second, fuel used and peak memory
    /// on stderr.
    #[arg(long)]
    pub stats: bool,
}

#[derive(Debug, Args)]
#[command(after_help = HOST_HELP)]
pub struct CheckArgs {
    #[command(flatten)]
    pub input: Input,
    #[command(flatten)]
    pub common: Common,
}

#[derive(Debug, Args)]
pub struct ReplArgs {
    #[command(flatten)]
    pub machine: Machine,
    /// A JSON file of host function stubs.
    #[arg(long = "host", value_name = "FILE")]
    pub host: Option<String>,
}

const HOST_HELP: &str =
    "A host stub file is a JSON object {\"functions\": [...]}; each function has \
a \"name\", an \"arity\", and one of \"answer\" (a datum), \"table\" (a list of {\"args\": [...], \
\"answer\": ...}) or \"error\" (a message). A datum is an integer, a boolean, a string, or \
{\"tag\": \"Cons\", \"fields\": [...]}.";

/// `--machine`: one machine, or every one.
#[derive(Clone, Copy, Debug)]
pub enum MachineChoice {
    One(MachineKind),
    All,
}

impl Machine {
    /// The machines to run, in order.
    pub fn kinds(&self) -> Result<Vec<MachineKind>, String> {
        match self.machine {
            Some(MachineChoice::All) => Ok(MachineKind::enabled().to_vec()),
            Some(MachineChoice::One(kind)) => Ok(vec![kind]),
            None => MachineKind::fastest()
                .map(|kind| vec![kind])
                .ok_or_else(|| "this build has no machine".to_string()),
        }
    }
}

fn machine_choice(name: &str) -> Result<MachineChoice, String> {
    if name == "all" {
        return Ok(MachineChoice::All);
    }
    MachineKind::from_name(name)
        .map(MachineChoice::One)
        .ok_or_else(|| {
            let names: Vec<&str> = MachineKind::enabled().iter().map(|m| m.name()).collect();
            format!(
                "no machine `{name}` in this build (one of: {}, all)",
                names.join(", ")
            )
        })
}

/// A whole number, with `_` between digits allowed: `1_000_000`.
pub fn count(text: &str) -> Result<u64, String> {
    digits(text).ok_or_else(|| format!("`{text}` is not a whole number"))
}

/// A number of bytes: a whole number (with `_` allowed), optionally followed
/// by `KiB`, `MiB` or `GiB` (1,024 to the power 1, 2, 3), with or without a
/// space before it.
pub fn size(text: &str) -> Result<usize, String> {
    let trimmed = text.trim_end();
    let (number, shift) = [("KiB", 10), ("MiB", 20), ("GiB", 30)]
        .iter()
        .find_map(|(unit, shift)| trimmed.strip_suffix(unit).map(|n| (n.trim_end(), *shift)))
        .unwrap_or((trimmed, 0));
    let bad =
        || format!("`{text}` is not a size (a whole number, optionally with KiB, MiB or GiB)");
    let n = digits(number).ok_or_else(bad)?;
    let bytes = n
        .checked_mul(1u64 << shift)
        .ok_or_else(|| format!("`{text}` is too large"))?;
    usize::try_from(bytes).map_err(|_| format!("`{text}` is too large"))
}

/// Digits with single `_` between them.
fn digits(text: &str) -> Option<u64> {
    let well_formed = !text.is_empty()
        && !text.starts_with('_')
        && !text.ends_with('_')
        && !text.contains("__")
        && text.bytes().all(|b| b.is_ascii_digit() || b == b'_');
    if !well_formed {
        return None;
    }
    text.bytes()
        .filter(u8::is_ascii_digit)
        .try_fold(0u64, |n, d| {
            n.checked_mul(10)?.checked_add(u64::from(d - b'0'))
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_take_underscores_between_digits() {
        assert_eq!(count("1_000_000"), Ok(1_000_000));
        assert_eq!(count("42"), Ok(42));
        for bad in ["", "_1", "1_", "1__0", "1e3", "-5", "18446744073709551616"] {
            assert!(count(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn sizes_take_binary_units() {
        assert_eq!(size("64MiB"), Ok(64 << 20));
        assert_eq!(size("1 GiB"), Ok(1 << 30));
        assert_eq!(
            size("512_KiB"),
            Err("`512_KiB` is not a size (a whole number, optionally with KiB, MiB or GiB)".into())
        );
        assert_eq!(size("4_096"), Ok(4096));
        assert!(size("3MB").is_err());
        assert!(size("99999999999999GiB").is_err());
    }
}
