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
            line.contains(
                r#""outcome":"value","value":"\"due: 101.70\"","data":"due: 101.70","steps":"#
            ),
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
                r#"{{"machine":"{name}","outcome":"value","value":"42","data":42,"steps":2,"fuel":2,"rules":{{"beta":0,"beta_rec":0,"let":1,"if":0,"prim":1,"case":0}}}}"#
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
    // Each line starts with the redex's line and column in the source.
    assert_eq!(
        trace,
        [
            "[1] 1:14 prim: 1 + 2",
            "[2] 1:1 beta: (\\a. a * a) 3",
            "[3] 1:6 prim: 3 * 3"
        ]
    );
}

/// Whether this build has the stepper, the machine that reports locations
/// (the others follow; these tests ask for it by name).
fn has_stepper() -> bool {
    orrery::MachineKind::from_name("stepper").is_some()
}

/// A division by zero three calls deep: `route` calls `split` calls `share`.
const COURIER: &str = "# a courier's share of a parcel fee
let share n = 100 / n in
let split k = share (k - 3) + 1 in
let route k = 2 * split k in
route 3
";

#[test]
fn a_runtime_error_shows_its_place_the_line_and_the_calls() {
    if !has_stepper() {
        return;
    }
    let file = program_file("courier.orr", COURIER);
    let out = orrery(&["run", &file, "--machine", "stepper"]);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(stdout(&out), "");
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(
        lines,
        [
            format!("{file}:2:15: division_by_zero: division by zero in /").as_str(),
            "let share n = 100 / n in",
            "              ^^^^^^^",
            format!("    share at {file}:3:15").as_str(),
            format!("    split at {file}:4:19").as_str(),
            format!("    route at {file}:5:1").as_str(),
            "stepper: 8 contractions (beta 3, beta_rec 0, let 3, if 0, prim 2, case 0)",
        ]
    );
    assert!(err.ends_with('\n'));
}

#[test]
fn a_runtime_error_in_json_has_its_place_and_backtrace_after_the_old_fields() {
    if !has_stepper() {
        return;
    }
    let file = program_file("courier-json.orr", COURIER);
    let out = orrery(&["run", &file, "--machine", "stepper", "--json"]);
    assert_eq!(out.status.code(), Some(1));
    let text = stdout(&out);
    let line = text.trim_end();
    // The fields that were there before come first, unchanged.
    let (old, new) = line.split_once(r#","at":"#).expect("an `at` field");
    assert_eq!(
        old,
        r#"{"machine":"stepper","outcome":"error","error":"division_by_zero","message":"division by zero in /","steps":8,"fuel":8,"rules":{"beta":3,"beta_rec":0,"let":3,"if":0,"prim":2,"case":0}"#
    );
    assert_eq!(
        new,
        r#"{"line":2,"col":15},"backtrace":[{"name":"share","line":3,"col":15},{"name":"split","line":4,"col":19},{"name":"route","line":5,"col":1}],"omitted":0}"#
    );
}

#[test]
fn out_of_fuel_in_json_has_its_place_and_backtrace() {
    if !has_stepper() {
        return;
    }
    // The loop's call is in tail position: it replaces its caller's mark,
    // so one frame is pending however long it runs.
    let file = program_file("spin.orr", "let rec spin n = spin (n + 1) in\nspin 0");
    let out = orrery(&[
        "run",
        &file,
        "--machine",
        "stepper",
        "--fuel",
        "7",
        "--json",
    ]);
    assert_eq!(out.status.code(), Some(4));
    let text = stdout(&out);
    assert!(
        text.trim_end().ends_with(
            r#""rules":{"beta":0,"beta_rec":3,"let":1,"if":0,"prim":3,"case":0},"at":{"line":1,"col":18},"backtrace":[{"name":"spin","line":1,"col":18}],"omitted":0}"#
        ),
        "{text}"
    );
    let out = orrery(&["run", &file, "--machine", "stepper", "--fuel", "7"]);
    assert_eq!(out.status.code(), Some(4));
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(
        lines[..4],
        [
            format!("{file}:1:18: out_of_fuel: out of fuel after 7 contractions").as_str(),
            "let rec spin n = spin (n + 1) in",
            "                 ^^^^^^^^^^^^",
            format!("    spin at {file}:1:18").as_str(),
        ]
    );
}

#[test]
fn a_deep_backtrace_keeps_both_ends_and_counts_the_rest() {
    if !has_stepper() {
        return;
    }
    let source = "let rec down n = if n == 0 then 1 / n else 1 + down (n - 1) in\ndown 40";
    let file = program_file("down.orr", source);
    let out = orrery(&["run", &file, "--machine", "stepper"]);
    assert_eq!(out.status.code(), Some(1));
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(
        lines[0],
        format!("{file}:1:33: division_by_zero: division by zero in /")
    );
    // The source line and its caret, then the frames.
    let frames = &lines[3..lines.len() - 1];
    // 41 calls are pending: 16 innermost, a line for the 9 between, and
    // the 16 outermost, the last of which is the program's own `down 40`.
    let ends = orrery::BACKTRACE_ENDS;
    assert_eq!(frames.len(), 2 * ends + 1);
    let inner = format!("    down at {file}:1:48");
    assert!(frames[..ends].iter().all(|f| *f == inner), "{err}");
    assert_eq!(frames[ends], "    … 9 more calls …");
    assert!(frames[ends + 1..2 * ends].iter().all(|f| *f == inner));
    assert_eq!(frames[2 * ends], format!("    down at {file}:2:1"));

    let out = orrery(&["run", &file, "--machine", "stepper", "--json"]);
    let text = stdout(&out);
    assert_eq!(
        text.matches(r#"{"name":"down","line":1,"col":48}"#).count(),
        31
    );
    assert!(text.contains(r#"{"name":"down","line":2,"col":1}],"omitted":9}"#));
}

#[test]
fn an_unnamed_function_has_a_word_of_its_own_in_the_backtrace() {
    if !has_stepper() {
        return;
    }
    let file = program_file("unnamed.orr", "(\\parcels. 100 / parcels) 0");
    let out = orrery(&["run", &file, "--machine", "stepper"]);
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(
        lines[..4],
        [
            format!("{file}:1:12: division_by_zero: division by zero in /").as_str(),
            "(\\parcels. 100 / parcels) 0",
            "           ^^^^^^^^^^^^^",
            format!("    λ at {file}:1:1").as_str(),
        ]
    );
    let out = orrery(&["run", &file, "--machine", "stepper", "--json"]);
    assert!(stdout(&out).contains(
        r#""at":{"line":1,"col":12},"backtrace":[{"name":null,"line":1,"col":1}],"omitted":0}"#
    ));
}

#[test]
fn a_runtime_error_on_a_wide_line_is_underlined_by_display_width() {
    if !has_stepper() {
        return;
    }
    // 温室 (greenhouse) is two characters two columns wide each (Unicode
    // Standard Annex #11, East Asian Width: both are Wide).
    let source = "let 温室 = 0 in\n\"🌱\" ++ decimal (12 / 温室)";
    let file = program_file("wide.orr", source);
    let out = orrery(&["run", &file, "--machine", "stepper"]);
    assert_eq!(out.status.code(), Some(1));
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(
        lines[..3],
        [
            format!("{file}:2:18: division_by_zero: division by zero in /").as_str(),
            "\"🌱\" ++ decimal (12 / 温室)",
            "                 ^^^^^^^^^",
        ]
    );
}
