//! The `orrery` command line (SEMANTICS §6): run a program on one machine or
//! on all of them, check or format it, or evaluate lines in a REPL; print
//! outcomes as text or JSON lines, and exit with a status that says how the
//! run ended. The subcommands live in `src/cli/`.

use std::io::Write;
use std::process::ExitCode;

use clap::{CommandFactory, Parser};

mod cli;

use cli::args::{Cli, Command};
use cli::{status, Io};

fn main() -> ExitCode {
    let mut io = Io::new();
    let args: Vec<String> = std::env::args().collect();
    let parsed = match repeated_flag(&args) {
        Some(flag) => Err(Cli::command().error(
            clap::error::ErrorKind::ArgumentConflict,
            format!("the argument '{flag}' cannot be used multiple times"),
        )),
        None => Cli::try_parse_from(&args),
    };
    let code = match parsed {
        Ok(cli) => match &cli.command {
            Command::Run(args) => cli::run::run(args, &mut io),
            Command::Check(args) => cli::run::check(args, &mut io),
            Command::Fmt(args) => cli::run::fmt(args, &mut io),
            Command::Repl(args) => cli::repl::repl(args, &mut io),
            Command::Completions { shell } => {
                clap_complete::generate(*shell, &mut Cli::command(), "orrery", &mut io.stdout);
                status::VALUE
            }
        },
        Err(error) => usage_error(&error, &mut io),
    };
    let _ = io.stdout.flush();
    ExitCode::from(code)
}

/// The flags that take no value, given more than once: clap refuses a
/// repeated option with a value but lets a repeated flag pass, and the
/// command line refuses both.
fn repeated_flag(args: &[String]) -> Option<&'static str> {
    const FLAGS: [&str; 3] = ["--json", "--trace", "--stats"];
    const TAKE_VALUES: [&str; 7] = [
        "-e",
        "--eval",
        "--fuel",
        "--memory",
        "--machine",
        "--host",
        "--max-source",
    ];
    let mut seen = [0usize; FLAGS.len()];
    let mut words = args.iter().skip(1);
    while let Some(word) = words.next() {
        if word == "--" {
            break;
        }
        if TAKE_VALUES.contains(&word.as_str()) {
            words.next();
            continue;
        }
        if let Some(i) = FLAGS.iter().position(|f| f == word) {
            seen[i] += 1;
            if seen[i] > 1 {
                return Some(FLAGS[i]);
            }
        }
    }
    None
}

/// A usage error is one line and a hint (as JSON under `--json`); help and
/// the version are printed whole, with status 0.
fn usage_error(error: &clap::Error, io: &mut Io) -> u8 {
    use clap::error::ErrorKind;
    match error.kind() {
        ErrorKind::DisplayHelp | ErrorKind::DisplayVersion => {
            let _ = write!(io.stdout, "{}", error.render());
            return status::VALUE;
        }
        ErrorKind::DisplayHelpOnMissingArgumentOrSubcommand => {
            let json = std::env::args().any(|a| a == "--json");
            let message = "a subcommand is needed: run, check, fmt, repl or completions";
            if json {
                io.fail(true, "usage_error", message, None);
            } else {
                let _ = writeln!(io.stderr, "orrery: {message}\nhint: see `orrery --help`");
            }
            return status::USAGE;
        }
        _ => {}
    }
    // clap's first line, with the line after it when it ends in a colon
    // (the missing arguments).
    let rendered = error.render().to_string();
    let mut lines = rendered.lines().map(str::trim).filter(|l| !l.is_empty());
    let mut first = lines
        .next()
        .unwrap_or("bad usage")
        .trim_start_matches("error: ")
        .to_string();
    if first.ends_with(':') {
        if let Some(next) = lines.next() {
            first = format!("{first} {next}");
        }
    }
    let json = std::env::args().any(|a| a == "--json");
    if json {
        io.fail(true, "usage_error", &first, None);
    } else {
        let subcommand = std::env::args()
            .nth(1)
            .filter(|a| ["run", "check", "fmt", "repl", "completions"].contains(&a.as_str()));
        let hint = match subcommand {
            Some(sub) => format!("orrery {sub} --help"),
            None => "orrery --help".to_string(),
        };
        let _ = writeln!(io.stderr, "orrery: {first}\nhint: see `{hint}`");
    }
    status::USAGE
}
