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

// ---- The subcommands, options and JSON of the command line's second
// ---- version (clap and serde_json).

/// Run the binary with `input` on its standard input.
fn orrery_with_input(args: &[&str], input: &str) -> Output {
    use std::process::Stdio;
    let mut child = Command::new(env!("CARGO_BIN_EXE_orrery"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run the orrery binary");
    let mut stdin = child.stdin.take().expect("a stdin pipe");
    stdin.write_all(input.as_bytes()).expect("write stdin");
    drop(stdin);
    child.wait_with_output().expect("the binary ends")
}

/// Every line of stdout parsed as JSON.
fn json_lines(o: &Output) -> Vec<serde_json::Value> {
    stdout(o)
        .lines()
        .map(|line| serde_json::from_str(line).unwrap_or_else(|e| panic!("{e}: {line}")))
        .collect()
}

/// The host stub file of these tests.
fn stub_file() -> String {
    program_file(
        "stubs.json",
        r#"{"functions": [
  {"name": "zone_of", "arity": 1, "table": [
    {"args": ["N1 4AB"], "answer": 1},
    {"args": ["E2 7CD"], "answer": 2}]},
  {"name": "surge", "arity": 1, "answer": 15},
  {"name": "depot", "arity": 0, "answer": {"tag": "Open", "fields": [9, true]}},
  {"name": "van_free", "arity": 0, "error": "all vans are out"}
]}"#,
    )
}

#[test]
fn version_and_help_exit_0() {
    let out = orrery(&["--version"]);
    assert_eq!(out.status.code(), Some(0));
    assert_eq!(
        stdout(&out).trim(),
        format!("orrery {}", env!("CARGO_PKG_VERSION"))
    );
    for args in [vec!["--help"], vec!["run", "--help"], vec!["help", "check"]] {
        let out = orrery(&args);
        assert_eq!(out.status.code(), Some(0), "{args:?}");
        assert!(stdout(&out).contains("Usage: orrery"), "{args:?}");
    }
}

#[test]
fn a_usage_error_is_one_line_and_a_hint() {
    let file = program_file("usage2.orr", "1");
    for args in [
        vec![],
        vec!["run"],
        vec!["walk"],
        vec!["run", file.as_str(), "--fuel", "lots"],
        vec!["run", file.as_str(), "--memory", "3MB"],
        vec!["run", file.as_str(), "--machine", "cek", "--machine", "env"],
        vec!["run", file.as_str(), "--stats", "--stats"],
        vec!["run", file.as_str(), "-e", "1"],
        vec!["completions", "teletype"],
    ] {
        let out = orrery(&args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let lines: Vec<String> = stderr(&out).lines().map(String::from).collect();
        assert_eq!(lines.len(), 2, "{args:?}: {lines:?}");
        assert!(lines[0].starts_with("orrery: "), "{lines:?}");
        assert!(lines[1].starts_with("hint: "), "{lines:?}");
    }
    // A repeated option names itself.
    let out = orrery(&["run", &file, "--fuel", "5", "--fuel", "6"]);
    assert!(
        stderr(&out).contains("'--fuel <N>' cannot be used multiple times"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn under_json_usage_and_syntax_errors_are_json_on_stdout() {
    let out = orrery(&["run", "-e", "1", "--fuel", "many", "--json"]);
    assert_eq!(out.status.code(), Some(2));
    let [error] = &json_lines(&out)[..] else {
        panic!("{}", stdout(&out))
    };
    assert_eq!(error["outcome"], "usage_error");
    assert!(
        error["message"]
            .as_str()
            .is_some_and(|m| m.contains("many")),
        "{error}"
    );

    let out = orrery(&["run", "-e", "1", "--json", "--json"]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(json_lines(&out)[0]["outcome"], "usage_error");

    let file = program_file("broken.orr", "let x = 1 in\nx + * 2");
    let out = orrery(&["run", &file, "--json"]);
    assert_eq!(out.status.code(), Some(3));
    let [error] = &json_lines(&out)[..] else {
        panic!("{}", stdout(&out))
    };
    assert_eq!(error["outcome"], "syntax_error");
    assert_eq!(
        (error["line"].as_u64(), error["col"].as_u64()),
        (Some(2), Some(5))
    );
    assert_eq!(error["file"], file.as_str());

    let out = orrery(&["run", "-e", "tide + moon", "--json"]);
    assert_eq!(out.status.code(), Some(3));
    let [error] = &json_lines(&out)[..] else {
        panic!()
    };
    let names: Vec<&str> = error["unbound"]
        .as_array()
        .expect("the unbound names")
        .iter()
        .map(|u| u["name"].as_str().unwrap_or(""))
        .collect();
    assert_eq!(names, ["tide", "moon"]);
}

#[test]
fn a_program_comes_from_a_file_from_stdin_or_from_e() {
    let file = program_file("sum.orr", "let f x = x * 3 in f 14");
    let from_file = orrery(&["run", &file, "--json"]);
    let from_stdin = orrery_with_input(&["run", "-", "--json"], "let f x = x * 3 in f 14");
    let from_e = orrery(&["run", "-e", "let f x = x * 3 in f 14", "--json"]);
    for out in [&from_file, &from_stdin, &from_e] {
        assert_eq!(out.status.code(), Some(0), "{}", stderr(out));
        assert_eq!(json_lines(out)[0]["value"], "42");
    }
    assert_eq!(stdout(&from_file), stdout(&from_stdin));
    assert_eq!(stdout(&from_file), stdout(&from_e));
    // Syntax errors name where the program came from.
    let out = orrery_with_input(&["run", "-"], "1 +");
    assert!(
        stderr(&out).starts_with("<stdin>:1:4: "),
        "{}",
        stderr(&out)
    );
    let out = orrery(&["run", "-e", "1 +"]);
    assert!(stderr(&out).starts_with("<-e>:1:4: "), "{}", stderr(&out));
}

#[test]
fn counts_and_sizes_take_separators_and_units() {
    let spin = "let rec spin n = spin (n + 1) in spin 0";
    let out = orrery(&["run", "-e", spin, "--fuel", "1_000", "--json"]);
    assert_eq!(out.status.code(), Some(4));
    assert_eq!(json_lines(&out)[0]["steps"], 1000);
    let grow = "let rec grow s = grow (s ++ s) in grow \"ab\"";
    let small = orrery(&["run", "-e", grow, "--memory", "64KiB", "--json"]);
    let large = orrery(&["run", "-e", grow, "--memory", "1 MiB", "--json"]);
    for out in [&small, &large] {
        assert_eq!(out.status.code(), Some(5));
        assert_eq!(json_lines(out)[0]["limit"], "memory");
    }
    let steps = |o: &Output| json_lines(o)[0]["steps"].as_u64().unwrap_or(0);
    // Each doubling is a few contractions: 16 times the room is 4 more doublings.
    assert!(
        steps(&large) > steps(&small),
        "{} {}",
        stdout(&small),
        stdout(&large)
    );
}

#[test]
fn first_order_values_have_data_and_functions_do_not() {
    for (source, data) in [
        ("6 * 7", serde_json::json!(42)),
        ("3 < 4", serde_json::json!(true)),
        (r#""tab\there""#, serde_json::json!("tab\there")),
        (
            "Cons(1, Cons(2, Nil))",
            serde_json::json!({"tag": "Cons", "fields": [1, {"tag": "Cons", "fields": [2, {"tag": "Nil", "fields": []}]}]}),
        ),
    ] {
        let out = orrery(&["run", "-e", source, "--json", "--machine", "all"]);
        for line in json_lines(&out) {
            assert_eq!(line["data"], data, "{source}");
        }
    }
    let out = orrery(&["run", "-e", "\\x. x", "--json"]);
    let line = &json_lines(&out)[0];
    assert_eq!(line["value"], "\\a. a");
    assert!(line.get("data").is_none(), "{line}");
    // A list of 50 is data; one of 10,000 would nest past what JSON readers
    // take (serde_json's default of 128 levels), so it has only its value.
    let list = |n: u32| {
        format!("let rec upto n acc = if n == 0 then acc else upto (n - 1) (Cons(n, acc)) in upto {n} Nil")
    };
    let out = orrery(&["run", "-e", &list(50), "--json"]);
    let line = &json_lines(&out)[0];
    let mut node = &line["data"];
    let mut length = 0;
    while node["tag"] == "Cons" {
        length += 1;
        node = &node["fields"][1];
    }
    assert_eq!((length, &node["tag"]), (50, &serde_json::json!("Nil")));
    let out = orrery(&["run", "-e", &list(10_000), "--json"]);
    let line = &json_lines(&out)[0];
    assert!(line["value"]
        .as_str()
        .is_some_and(|v| v.starts_with("Cons(1, Cons(2, ")));
    assert!(line.get("data").is_none());
}

#[test]
fn every_outcome_is_one_json_object_with_its_fields() {
    for (source, extra, outcome, code) in [
        ("100 / 0", vec![], "error", 1),
        (
            "let rec f n = f n in f 0",
            vec!["--fuel", "10"],
            "out_of_fuel",
            4,
        ),
        (
            "let rec g s = g (s ++ s) in g \"x\"",
            vec!["--memory", "4096"],
            "limit",
            5,
        ),
    ] {
        let mut args = vec!["run", "-e", source, "--json", "--machine", "all"];
        args.extend(extra);
        let out = orrery(&args);
        assert_eq!(out.status.code(), Some(code), "{source}");
        for line in json_lines(&out) {
            assert_eq!(line["outcome"], outcome);
            for field in ["machine", "steps", "fuel", "rules"] {
                assert!(line.get(field).is_some(), "{field} in {line}");
            }
            assert!(line["rules"]["beta_rec"].is_u64(), "{line}");
        }
    }
}

#[test]
fn host_stubs_let_programs_that_call_host_functions_run() {
    let stubs = stub_file();
    let courier = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/courier_rules.orr");
    // Without stubs the host functions are unbound names.
    let out = orrery(&["run", courier]);
    assert_eq!(out.status.code(), Some(3));
    let run = |source: &str| {
        orrery(&[
            "run",
            "-e",
            source,
            "--host",
            &stubs,
            "--json",
            "--machine",
            "all",
        ])
    };
    let out = run("zone_of \"E2 7CD\" * 100 + surge 0");
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    for line in json_lines(&out) {
        assert_eq!(line["data"], 215);
    }
    let out = run("depot");
    assert_eq!(
        json_lines(&out)[0]["data"],
        serde_json::json!({"tag": "Open", "fields": [9, true]})
    );
    let out = run("van_free");
    assert_eq!(out.status.code(), Some(1));
    let line = &json_lines(&out)[0];
    assert_eq!(
        (line["error"].as_str(), line["message"].as_str()),
        (Some("host_error"), Some("van_free: all vans are out"))
    );
    let out = run("zone_of \"nowhere\"");
    assert_eq!(out.status.code(), Some(1));
    assert!(json_lines(&out)[0]["message"]
        .as_str()
        .unwrap_or("")
        .contains("no stub answer for (\"nowhere\")"));
    // The value prints host calls by name.
    let out = orrery(&["run", "-e", "\\p. zone_of p", "--host", &stubs]);
    assert_eq!(stdout(&out).trim(), "\\a. zone_of a");
}

#[test]
fn a_malformed_stub_file_is_an_error_with_its_position() {
    for (text, line, col, says) in [
        // Where the reader stood when it saw the problem: for a function
        // without an answer, just after it.
        ("{\"functions\": [\n  {\"name\": \"x\", \"arity\": 1}\n]}", 3, 1, "exactly one of"),
        ("{\"functions\": [\n  {\"name\": \"x\", \"arity\": 1, \"answer\": 1, \"error\": \"e\"}]}", 2, 55, "exactly one of"),
        ("{\"functions\": [\n  {\"name\": \"x\", \"arity\": 0, \"answer\": [1]}]}", 2, 42, "a list is not a datum"),
        ("{\"functions\": [\n  {\"name\": \"x\", \"arity\": one}]}", 2, 26, "expected value"),
        ("{\"functions\": [], \"extra\": 1}", 1, 25, "unknown field"),
    ] {
        let stubs = program_file("bad-stubs.json", text);
        let out = orrery(&["run", "-e", "1", "--host", &stubs]);
        assert_eq!(out.status.code(), Some(2), "{text}");
        let message = stderr(&out);
        assert!(message.contains(&format!("bad-stubs.json:{line}:{col}: ")), "{message}");
        assert!(message.contains(says), "{message}");
        let out = orrery(&["run", "-e", "1", "--host", &stubs, "--json"]);
        let [error] = &json_lines(&out)[..] else { panic!() };
        assert_eq!(error["outcome"], "host_error");
        assert_eq!((error["line"].as_u64(), error["col"].as_u64()), (Some(line), Some(col)), "{text}");
    }
}

#[test]
fn check_names_the_host_functions_or_every_unbound_name() {
    let stubs = stub_file();
    let courier = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/courier_rules.orr");
    let out = orrery(&["check", courier, "--host", &stubs]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(
        stdout(&out).ends_with("ok, host functions: zone_of, surge\n"),
        "{}",
        stdout(&out)
    );
    let out = orrery(&["check", courier, "--host", &stubs, "--json"]);
    assert_eq!(
        json_lines(&out)[0]["host_names"],
        serde_json::json!(["zone_of", "surge"])
    );
    let out = orrery(&["check", courier]);
    assert_eq!(out.status.code(), Some(3));
    let lines: Vec<String> = stdout(&out).lines().map(String::from).collect();
    assert_eq!(lines.len(), 2, "{lines:?}");
    assert!(
        lines[0].ends_with(":16:18: unbound name `zone_of`"),
        "{lines:?}"
    );
    assert!(
        lines[1].ends_with(":20:23: unbound name `surge`"),
        "{lines:?}"
    );
    let out = orrery(&["check", "-e", "1 +"]);
    assert_eq!(out.status.code(), Some(3));
    assert_eq!(orrery(&["check", "-e", "1 + 2"]).status.code(), Some(0));
}

#[test]
fn fmt_prints_a_canonical_form_that_parses_to_the_same_term() {
    let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/examples");
    for name in ["greenhouse.orr", "loyalty.orr", "locker_fees.orr"] {
        let path = format!("{dir}/{name}");
        let source = std::fs::read_to_string(&path).expect("an example");
        let out = orrery(&["fmt", &path]);
        if out.status.code() == Some(3) {
            continue; // calls host functions this test has no stubs for
        }
        assert_eq!(out.status.code(), Some(0), "{name}: {}", stderr(&out));
        let formatted = stdout(&out);
        let arena = orrery::Arena::new();
        let original = orrery::parse(&arena, &source).expect("the example parses");
        let again = orrery::parse(&arena, &formatted).expect("the canonical form parses");
        assert_eq!(
            orrery::print(original.to_term(&arena)),
            orrery::print(again.to_term(&arena)),
            "{name}"
        );
        // Formatting the canonical form changes nothing.
        let twice = orrery_with_input(&["fmt", "-"], &formatted);
        assert_eq!(stdout(&twice), formatted, "{name}");
    }
}

#[test]
fn stats_report_time_rate_fuel_and_peak_memory() {
    let out = orrery(&[
        "run",
        "-e",
        "let rec f n = if n == 0 then 0 else f (n - 1) in f 1000",
        "--stats",
    ]);
    assert_eq!(out.status.code(), Some(0));
    let text = stderr(&out);
    for part in [
        " s, ",
        "4004 contractions (",
        " a second)",
        "fuel used 4004",
        "peak memory ",
    ] {
        assert!(text.contains(part), "{part} in {text}");
    }
}

#[test]
fn no_progress_line_when_stderr_is_piped() {
    // A run of several million contractions on a machine that can pause,
    // with stderr piped: only the report reaches it.
    let out = orrery(&[
        "run",
        "-e",
        "let rec f n = f (n + 1) in f 0",
        "--fuel",
        "30_000_000",
        "--machine",
        "stepper",
    ]);
    assert_eq!(out.status.code(), Some(4));
    let text = stderr(&out);
    assert!(!text.contains('\r') && !text.contains("a second"), "{text}");
}

#[test]
fn large_and_endless_sources_are_refused_without_reading_them_whole() {
    let out = orrery(&["run", "/dev/zero"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("larger than the maximum source size of 67108864 bytes"),
        "{}",
        stderr(&out)
    );
    let file = program_file("long.orr", &format!("{}1", "1 + ".repeat(100)));
    let out = orrery(&["run", &file, "--max-source", "100"]);
    assert_eq!(out.status.code(), Some(2));
    let out = orrery_with_input(
        &["run", "-", "--max-source", "10", "--json"],
        "1 + 2 + 3 + 4",
    );
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(json_lines(&out)[0]["outcome"], "input_error");
    // The largest maximum there is reads a source as any other.
    let out = orrery_with_input(
        &["run", "-", "--max-source", "18446744073709551615"],
        "6 * 7",
    );
    assert_eq!((out.status.code(), stdout(&out).trim()), (Some(0), "42"));
}

#[test]
fn a_closed_stdout_ends_quietly_with_the_run_status() {
    use std::process::Stdio;
    // A value of 256 KiB: more than a pipe holds, so writing it meets the
    // closed end.
    let source = "let rec r n s = if n == 0 then s else r (n - 1) (s ++ s) in r 18 \"x\"";
    let mut child = Command::new(env!("CARGO_BIN_EXE_orrery"))
        .args(["run", "-e", source])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run the orrery binary");
    drop(child.stdout.take());
    let out = child.wait_with_output().expect("the binary ends");
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(!stderr(&out).contains("orrery:"), "{}", stderr(&out));
}

#[test]
fn a_long_line_in_an_error_is_cut_to_a_window() {
    let line = format!("{} + * 1", "1 + ".repeat(5_000));
    let out = orrery(&["run", "-e", &line]);
    assert_eq!(out.status.code(), Some(3));
    for shown in stderr(&out).lines() {
        assert!(
            shown.chars().count() < 200,
            "{} columns",
            shown.chars().count()
        );
    }
}

#[test]
fn completions_are_printed_for_a_shell() {
    for shell in ["bash", "zsh", "fish"] {
        let out = orrery(&["completions", shell]);
        assert_eq!(out.status.code(), Some(0));
        assert!(stdout(&out).contains("orrery"), "{shell}");
        assert!(stdout(&out).contains("max-source"), "{shell}");
    }
}

#[test]
fn the_repl_keeps_definitions_and_takes_commands_through_piped_input() {
    let input = "let rate = 40\nlet cost days = days * rate\ncost 3 + 5\n:fuel 3\nlet rec spin n = spin n in spin 0\n:fuel 1_000\n100 / (rate - 40)\n1 +\n:machine abacus\n:defs\n:quit\nrate\n";
    let out = orrery_with_input(&["repl"], input);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let said = stdout(&out);
    let lines: Vec<&str> = said.lines().collect();
    assert_eq!(
        &lines[..4],
        ["defined", "defined", "125", "fuel 3"],
        "{said}"
    );
    assert!(said.contains("no machine `abacus`"), "{said}");
    assert!(
        said.contains("let rate = 40\nlet cost days = days * rate\n"),
        "{said}"
    );
    // Nothing after :quit is read.
    assert_eq!(lines.iter().filter(|l| **l == "40").count(), 0, "{said}");
    let errors = stderr(&out);
    assert!(
        errors.contains("out_of_fuel: out of fuel after 3 contractions"),
        "{errors}"
    );
    assert!(errors.contains("division_by_zero"), "{errors}");
    // An error shows its line with a caret.
    assert!(
        errors.contains("100 / (rate - 40)\n^^^^^^^^^^^^^^^^^"),
        "{errors}"
    );
    assert!(errors.contains("unexpected end of input"), "{errors}");
}

#[test]
fn the_repl_switches_machine_and_traces_the_stepper() {
    if !has_stepper() {
        return;
    }
    let out = orrery_with_input(
        &["repl"],
        ":machine stepper\n:trace\n2 * 3\n:trace\n2 * 4\n",
    );
    assert_eq!(out.status.code(), Some(0));
    let said = stdout(&out);
    assert!(
        said.contains("machine stepper\ntrace on\n6\ntrace off\n8\n"),
        "{said}"
    );
    let errors = stderr(&out);
    let trace: Vec<&str> = errors.lines().filter(|l| l.starts_with('[')).collect();
    assert_eq!(trace, ["[1] 1:1 prim: 2 * 3"]);
}
