//! The command line of SEMANTICS §6, run as a separate process: the JSON
//! lines, the exit statuses, syntax errors with a caret, and traces. Built
//! with the `cli` feature only (it needs the binary); the tests that ask for
//! the stepper by name do nothing in a build without it.

use std::io::Write;
use std::process::{Command, Output};

fn orrery(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_orrery"))
        .args(args)
        .output()
        .expect("run the orrery binary")
}

/// Write `source` to a fresh file and return its path.
fn program_file(name: &str, source: &str) -> String {
    let dir = std::env::temp_dir().join(format!("orrery-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join(name);
    let mut f = std::fs::File::create(&path).expect("temp file");
    f.write_all(source.as_bytes()).expect("write");
    path.to_string_lossy().into_owned()
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn the_bundled_example_agrees_on_every_machine() {
    let example = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/loyalty.orr");
    let out = orrery(&["run", example, "--machine", "all", "--json"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = stdout(&out);
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), orrery::MachineKind::enabled().len());
    for line in &lines {
        assert!(
            line.contains(r#""outcome":"value","value":"\"due: 101.70\"","steps":"#),
            "{line}"
        );
        // Everything after the machine name is identical across machines.
        let rest = line.split_once(r#","outcome""#).unwrap().1;
        assert_eq!(rest, lines[0].split_once(r#","outcome""#).unwrap().1);
    }
}

#[test]
fn json_lines_have_the_documented_shape() {
    let file = program_file("shape.orr", "let x = 6 in x * 7");
    for machine in orrery::MachineKind::enabled() {
        let name = machine.name();
        let out = orrery(&["run", &file, "--machine", name, "--json"]);
        assert_eq!(out.status.code(), Some(0), "{name}");
        assert_eq!(
            stdout(&out).trim_end(),
            format!(
                r#"{{"machine":"{name}","outcome":"value","value":"42","steps":2,"fuel":2,"rules":{{"beta":0,"beta_rec":0,"let":1,"if":0,"prim":1,"case":0}}}}"#
            )
        );
    }
}

#[test]
fn exit_statuses_follow_the_outcome() {
    let cases = [
        ("value.orr", "1 + 1", vec![], 0, r#""outcome":"value""#),
        (
            "error.orr",
            "10 / (2 - 2)",
            vec![],
            1,
            r#""error":"division_by_zero","message":"#,
        ),
        (
            "fuel.orr",
            "(rec f x. f x) 0",
            vec!["--fuel", "1000"],
            4,
            r#""outcome":"out_of_fuel","steps":1000,"#,
        ),
        (
            "limit.orr",
            "let rec grow s = grow (s ++ s) in grow \"ab\"",
            vec!["--memory", "1000000"],
            5,
            r#""outcome":"limit","limit":"memory","message":"#,
        ),
    ];
    for (name, source, extra, code, fragment) in cases {
        let file = program_file(name, source);
        let mut args = vec!["run", file.as_str(), "--machine", "all", "--json"];
        args.extend(extra);
        let out = orrery(&args);
        assert_eq!(out.status.code(), Some(code), "{name}: {}", stderr(&out));
        for line in stdout(&out).lines() {
            assert!(line.contains(fragment), "{name}: {line}");
        }
    }
}

#[test]
fn bad_usage_exits_2() {
    let file = program_file("usage.orr", "1");
    for args in [
        vec!["run"],
        vec!["walk", file.as_str()],
        vec!["run", file.as_str(), "--fuel", "lots"],
        vec!["run", file.as_str(), "--machine", "abacus"],
        vec!["run", file.as_str(), "--colour"],
        vec!["run", "/no/such/file.orr"],
    ] {
        let out = orrery(&args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        assert!(!stderr(&out).is_empty());
    }
    assert_eq!(orrery(&["help"]).status.code(), Some(0));
}

#[test]
fn a_syntax_error_shows_file_line_column_and_a_caret() {
    let file = program_file("syntax.orr", "let x = 1 in\n  x + y\n");
    let out = orrery(&["run", &file]);
    assert_eq!(out.status.code(), Some(3));
    let err = stderr(&out);
    let mut lines = err.lines();
    assert_eq!(
        lines.next(),
        Some(format!("{file}:2:7: unbound name `y`").as_str())
    );
    assert_eq!(lines.next(), Some("  x + y"));
    assert_eq!(lines.next(), Some("      ^"));
}

#[test]
fn trace_shows_each_contraction_with_rule_and_redex() {
    if orrery::MachineKind::from_name("stepper").is_none() {
        return; // --trace shows the stepper's contractions
    }
    let file = program_file("trace.orr", "(\\x. x * x) (1 + 2)");
    let out = orrery(&["run", &file, "--machine", "stepper", "--trace"]);
    assert_eq!(out.status.code(), Some(0));
    assert_eq!(stdout(&out).trim(), "9");
    let err = stderr(&out);
    let trace: Vec<&str> = err.lines().filter(|l| l.starts_with('[')).collect();
    assert_eq!(
        trace,
        [
            "[1] prim: 1 + 2",
            "[2] beta: (\\a. a * a) 3",
            "[3] prim: 3 * 3"
        ]
    );
}
