//! `orrery repl`: read a line, evaluate it, print the value; with line
//! editing and history on a terminal (rustyline), and plain lines when
//! standard input is piped.
//!
//! A line `let x = e` (or `let f x = e`, `let rec f x = e`) without `in`
//! defines `x` for the lines after it: each line is evaluated as the
//! definitions so far, each followed by `in`, then the line. Commands:
//! `:machine NAME`, `:fuel N`, `:trace` (the stepper's contractions, on or
//! off), `:defs`, `:help` and `:quit`.

use std::io::Write;

use rustyline::error::ReadlineError;

use orrery::{HostFunctions, Limits, MachineKind};

use super::args::{count, ReplArgs};
use super::{host_table, parse_program, run, status, text_report, Io};

const PROMPT: &str = "orrery> ";

const HELP: &str =
    "Enter an expression to evaluate it, or `let NAME = EXPR` (no `in`) to define NAME \
for later lines.
  :machine NAME   run on another machine
  :fuel N         contractions allowed per line
  :trace          show (or stop showing) the stepper's contractions
  :defs           list the definitions so far
  :quit           leave (so does end of input)";

/// The REPL's state.
struct Session {
    defs: Vec<String>,
    machine: MachineKind,
    limits: Limits,
    trace: bool,
    host: HostFunctions,
}

impl Session {
    /// The definitions so far, each followed by `in` on a line of its own,
    /// then `line`.
    fn compose(&self, line: &str) -> String {
        let mut text = String::new();
        for def in &self.defs {
            text.push_str(def);
            text.push_str("\nin\n");
        }
        text.push_str(line);
        text
    }

    /// Evaluate or define `line`, printing what it gives.
    fn line(&mut self, line: &str, io: &mut Io) {
        let source = self.compose(line);
        let program = match parse_program(source.as_bytes(), &self.host) {
            Ok(program) => program,
            Err(error) => {
                // Not an expression: perhaps a definition.
                if starts_with_let(line) {
                    let trial = format!("{source}\nin 0");
                    if parse_program(trial.as_bytes(), &self.host).is_ok() {
                        self.defs.push(line.to_string());
                        let _ = writeln!(io.stdout, "defined");
                        return;
                    }
                }
                let _ = write!(io.stderr, "{}", error.render("repl", &source));
                return;
            }
        };
        let report = run::run_line(self.machine, &program, &self.limits, self.trace);
        let _ = text_report(
            self.machine.name(),
            &report,
            &self.host,
            ("repl", &source),
            &mut io.stdout,
            &mut io.stderr,
        );
    }

    /// Carry out a `:` command; `false` to leave.
    fn command(&mut self, command: &str, io: &mut Io) -> bool {
        let mut words = command.split_whitespace();
        let said = match (words.next(), words.next(), words.next()) {
            (Some(":quit" | ":q"), None, _) => return false,
            (Some(":help"), None, _) => HELP.to_string(),
            (Some(":defs"), None, _) if self.defs.is_empty() => "no definitions".to_string(),
            (Some(":defs"), None, _) => self.defs.join("\n"),
            (Some(":machine"), Some(name), None) => match MachineKind::from_name(name) {
                Some(kind) => {
                    self.machine = kind;
                    if self.trace && name != "stepper" {
                        self.trace = false;
                        format!("machine {name} (the trace is off: it shows the stepper's contractions)")
                    } else {
                        format!("machine {name}")
                    }
                }
                None => {
                    let names: Vec<&str> =
                        MachineKind::enabled().iter().map(|m| m.name()).collect();
                    format!("no machine `{name}` (one of: {})", names.join(", "))
                }
            },
            (Some(":fuel"), Some(n), None) => match count(n) {
                Ok(fuel) => {
                    self.limits.fuel = fuel;
                    format!("fuel {fuel}")
                }
                Err(why) => why,
            },
            (Some(":trace"), None, _) if self.machine.name() != "stepper" => {
                "the trace shows the stepper's contractions: `:machine stepper` first".to_string()
            }
            (Some(":trace"), None, _) => {
                self.trace = !self.trace;
                format!("trace {}", if self.trace { "on" } else { "off" })
            }
            _ => format!("unknown command `{command}` (try :help)"),
        };
        let _ = writeln!(io.stdout, "{said}");
        true
    }
}

/// Whether `line` begins with the keyword `let`.
fn starts_with_let(line: &str) -> bool {
    let rest = line.trim_start();
    rest.strip_prefix("let")
        .is_some_and(|after| after.starts_with(|c: char| c.is_whitespace()))
}

/// `orrery repl`.
pub fn repl(args: &ReplArgs, io: &mut Io) -> u8 {
    let host = match host_table(
        io,
        args.host.as_deref(),
        super::args::DEFAULT_MAX_SOURCE,
        false,
    ) {
        Ok(host) => host,
        Err(code) => return code,
    };
    let machine = match args.machine.kinds() {
        Ok(kinds) if kinds.len() == 1 => kinds[0],
        Ok(_) => {
            io.fail(
                false,
                "usage_error",
                "the repl runs one machine, not all",
                None,
            );
            return status::USAGE;
        }
        Err(message) => {
            io.fail(false, "usage_error", &message, None);
            return status::USAGE;
        }
    };
    let mut session = Session {
        defs: Vec::new(),
        machine,
        limits: Limits::default()
            .with_fuel(args.machine.fuel)
            .with_memory(args.machine.memory),
        trace: false,
        host,
    };
    let mut editor = match rustyline::DefaultEditor::new() {
        Ok(editor) => editor,
        Err(e) => {
            io.fail(
                false,
                "input_error",
                &format!("cannot read lines: {e}"),
                None,
            );
            return status::USAGE;
        }
    };
    loop {
        let line = match editor.readline(PROMPT) {
            Ok(line) => line,
            Err(ReadlineError::Interrupted) => continue,
            Err(ReadlineError::Eof) => return status::VALUE,
            Err(e) => {
                io.fail(
                    false,
                    "input_error",
                    &format!("cannot read a line: {e}"),
                    None,
                );
                return status::USAGE;
            }
        };
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let _ = editor.add_history_entry(line);
        if line.starts_with(':') {
            if !session.command(line, io) {
                return status::VALUE;
            }
        } else {
            session.line(line, io);
        }
        let _ = io.stdout.flush();
    }
}
