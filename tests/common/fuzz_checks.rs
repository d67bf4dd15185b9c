//! The properties the fuzz targets check, kept in one place so that the cargo
//! fuzz targets (`fuzz/fuzz_targets/`) and the replay test
//! (`tests/suite/fuzz_replay.rs`) run exactly the same code. It depends on
//! orrery alone, and brings the harness (`harness.rs`) with it by path, so
//! the fuzz crate can include it by path.

#[path = "harness.rs"]
pub mod harness;
#[path = "marks.rs"]
pub mod marks;

use harness::Harness;
use orrery::{parse, parse_bytes, print_limited, Arena, Arm, Limits, Outcome, Prim, Program, Term};

/// Fuel for each differential run: enough for short loops, small enough that
/// a run takes microseconds.
pub const FUEL: u64 = 2_000;

/// Memory for each differential run.
pub const MEMORY: usize = 4 << 20;

/// Programs printed longer than this are not round-tripped (a term with heavy
/// sharing can print exponentially long).
const ROUND_TRIP_BYTES: usize = 1 << 16;

/// An `agree` input that starts with this byte is a program in the text
/// syntax (its first line is then a comment); any other input is decoded by
/// [`decode`].
pub const TEXT_MARKER: u8 = b'#';

/// Arbitrary bytes given to `parse_bytes`: a program that parses prints to
/// text that parses back to the same de Bruijn term (and prints the same
/// again); an input that does not parse gets an error whose line and column
/// lie within the input. Panics (the fuzzer's crash) when either fails.
pub fn check_parse(bytes: &[u8]) {
    let arena = Arena::new();
    match parse_bytes(&arena, bytes) {
        Ok(program) => round_trip(&arena, program.to_term(&arena), usize::MAX),
        Err(err) => {
            assert!(
                !err.message.is_empty() && !err.message.starts_with("internal error"),
                "bad message {err}"
            );
            let (lines, last) = line_lengths(bytes, err.line);
            assert!(
                err.line >= 1 && err.line <= lines,
                "line {} outside the input's {lines} lines",
                err.line
            );
            // Columns are display widths: at most a few per character.
            assert!(
                err.column >= 1 && err.column <= 3 * last + 1,
                "column {} outside line {} of {last} characters",
                err.column,
                err.line
            );
            // Rendering the error for a person never panics either.
            let text = String::from_utf8_lossy(bytes);
            let shown = err.render("<fuzz>", &text);
            assert!(shown.starts_with(&format!("<fuzz>:{}:{}:", err.line, err.column)));
        }
    }
}

/// The number of lines of `bytes` (1 more than its line feeds) and the
/// number of characters of line `line` (1-based), counting characters by
/// their first bytes as the parser's positions do.
fn line_lengths(bytes: &[u8], line: u32) -> (u32, u32) {
    let lines = bytes.split(|&b| b == b'\n').count();
    let chars = bytes
        .split(|&b| b == b'\n')
        .nth(line.saturating_sub(1) as usize)
        .map_or(0, |l| l.iter().filter(|&&b| b & 0xC0 != 0x80).count());
    let clamp = |n: usize| u32::try_from(n).unwrap_or(u32::MAX);
    (clamp(lines), clamp(chars))
}

/// Print `term`, parse the text back, and insist on the same term and the
/// same text; skipped when the text is longer than `max_bytes`.
fn round_trip(arena: &Arena, term: &Term<'_>, max_bytes: usize) {
    let printed = print_limited(term, max_bytes);
    if printed.truncated {
        return;
    }
    let again = match parse(arena, &printed.text) {
        Ok(p) => p.to_term(arena),
        Err(e) => panic!("the printed program does not parse: {e}\n{}", printed.text),
    };
    assert!(
        again == term,
        "the printed program parses to another term:\n{}",
        printed.text
    );
    assert_eq!(print_limited(again, max_bytes).text, printed.text);
}

/// Arbitrary bytes made into a closed program (text after [`TEXT_MARKER`],
/// otherwise [`decode`]d), run on every machine of the table with [`FUEL`]
/// and [`MEMORY`] through the harness, which checks each report against
/// the limits and compares every machine with the reference (SEMANTICS §3);
/// a pausing machine resumed in small slices must end as its whole run did;
/// and a run that ended after using `n` units of fuel must, on every
/// machine, run out of fuel (or stop at a resource limit) given `n - 1`.
/// Panics (the fuzzer's crash) with every failure found.
pub fn check_agree(bytes: &[u8]) {
    let arena = Arena::new();
    let term = match bytes.split_first() {
        Some((&TEXT_MARKER, _)) => match std::str::from_utf8(bytes)
            .ok()
            .and_then(|text| orrery::parse_term(&arena, text).ok())
        {
            Some(term) => term,
            // Inputs that do not parse are the parse target's business.
            None => return,
        },
        // Half the decoded programs carry spans and names, half none.
        _ if bytes.len() % 2 == 0 => marks::marked(&arena, decode(&arena, bytes)),
        _ => decode(&arena, bytes),
    };
    let program = match Program::new(term) {
        Ok(p) => p,
        Err(e) => panic!("the decoder built an invalid program: {e}"),
    };
    round_trip(&arena, term, ROUND_TRIP_BYTES);
    let limits = Limits::default().with_fuel(FUEL).with_memory(MEMORY);
    let mut h = Harness::new();
    let name = "the input";
    let whole = h.run(name, &program, &limits);
    let Some(used) = whole
        .runs
        .iter()
        .find(|r| matches!(r.report.outcome, Outcome::Value(_) | Outcome::Error(_)))
        .map(|r| r.report.counts.fuel())
    else {
        return h.finish();
    };
    h.pauses(&whole, &program, 1 + bytes.len() as u64 % 7);
    if used > 0 {
        let shorter = h.run(name, &program, &limits.clone().with_fuel(used - 1));
        h.expect(
            &shorter,
            "out of fuel or a resource limit, one unit short",
            |r| matches!(r.outcome, Outcome::OutOfFuel | Outcome::Limit(_)),
        );
    }
    h.finish();
}

/// Constructor tags the decoder uses, each with its one arity.
const TAGS: [(&str, u32); 5] = [
    ("Nil", 0),
    ("Leaf", 0),
    ("Some", 1),
    ("Pair", 2),
    ("Node", 3),
];

const INTS: [i64; 10] = [0, 1, -1, 2, 3, 10, 64, i64::MAX, i64::MIN, -7];

const STRINGS: [&str; 6] = ["", "a", "ab", "é\u{1F600}", "line\n\"q\"", "\u{0}"];

/// How deep the decoder nests terms: it recurses natively, so its depth is
/// capped (the term's depth, not the input's length, bounds the recursion).
const MAX_DEPTH: u32 = 40;

/// How many nodes the decoder builds before it builds only leaves.
const MAX_NODES: u32 = 4_000;

/// How many shared subterms one input may build. The program image keeps
/// closed shared subterms shared but unfolds open ones into a tree (refused
/// past `MAX_NODES` nodes; see `tests/suite/hostile.rs`), so deeper sharing
/// only tests that bound again.
const MAX_SHARES: u32 = 8;

/// Decode bytes into a closed, valid term through the builder API, so almost
/// every input is a runnable program: each byte picks a construct, variables
/// are folded into the binders in scope, arities are always right and case
/// arms are distinct. When the bytes run out, the rest is leaves.
pub fn decode<'a>(arena: &'a Arena, bytes: &[u8]) -> &'a Term<'a> {
    let mut decoder = Decoder {
        arena,
        bytes,
        at: 0,
        nodes: 0,
        shares: 0,
    };
    decoder.term(0, 0)
}

struct Decoder<'a, 'b> {
    arena: &'a Arena,
    bytes: &'b [u8],
    at: usize,
    nodes: u32,
    shares: u32,
}

impl<'a> Decoder<'a, '_> {
    fn byte(&mut self) -> u8 {
        let b = self.bytes.get(self.at).copied().unwrap_or(0);
        self.at += 1;
        b
    }

    fn pick<T: Copy>(&mut self, table: &[T]) -> T {
        table[usize::from(self.byte()) % table.len()]
    }

    /// A term under `binders` binders, `depth` levels down.
    fn term(&mut self, binders: u32, depth: u32) -> &'a Term<'a> {
        let a = self.arena;
        self.nodes += 1;
        let op = if depth >= MAX_DEPTH || self.nodes >= MAX_NODES || self.at >= self.bytes.len() {
            self.byte() % 4
        } else {
            self.byte() % 24
        };
        let sub = |d: &mut Self, extra: u32| d.term(binders + extra, depth + 1);
        match op {
            0 | 4 | 5 if binders > 0 => {
                let i = u32::from(self.byte()) % binders;
                a.var(i)
            }
            0 | 1 | 4 | 5 => {
                let n = self.pick(&INTS);
                a.int(n)
            }
            2 => {
                let b = self.byte() % 2 == 0;
                a.boolean(b)
            }
            3 => {
                let s = self.pick(&STRINGS);
                a.string(s)
            }
            6 | 7 => a.lam(sub(self, 1)),
            8 => a.rec_lam(sub(self, 2)),
            9..=11 => {
                let f = sub(self, 0);
                a.app(f, sub(self, 0))
            }
            12 => {
                let bound = sub(self, 0);
                a.let_in(bound, sub(self, 1))
            }
            13 => {
                let c = sub(self, 0);
                let t = sub(self, 0);
                a.if_then_else(c, t, sub(self, 0))
            }
            14 | 15 => {
                let op = self.pick(&Prim::ALL);
                let args: Vec<_> = (0..op.arity()).map(|_| sub(self, 0)).collect();
                a.prim(op, &args)
            }
            16 | 17 => {
                let (tag, arity) = self.pick(&TAGS);
                let fields: Vec<_> = (0..arity).map(|_| sub(self, 0)).collect();
                a.con(tag, &fields)
            }
            18 | 19 => self.case(binders, depth),
            20 if self.shares < MAX_SHARES => {
                self.shares += 1;
                // Sharing: one subterm reached twice, so nesting this gives
                // terms whose tree is exponentially larger than their graph.
                let t = sub(self, 0);
                match self.byte() % 3 {
                    0 => a.app(t, t),
                    1 => a.con("Pair", &[t, t]),
                    _ => a.prim(Prim::Concat, &[t, t]),
                }
            }
            21 => {
                // (rec f x. if x < 1 then body else f (x - 1)) n: a loop.
                let n = i64::from(self.byte() % 16);
                let x = a.var(0);
                let again = a.app(a.var(1), a.prim(Prim::Sub, &[x, a.int(1)]));
                let test = a.prim(Prim::Lt, &[x, a.int(1)]);
                let body = sub(self, 2);
                a.app(a.rec_lam(a.if_then_else(test, body, again)), a.int(n))
            }
            22 => {
                // A function applied to a value: a beta redex.
                let body = sub(self, 1);
                a.app(a.lam(body), sub(self, 0))
            }
            _ => {
                let (tag, arity) = self.pick(&TAGS);
                let fields: Vec<_> = (0..arity).map(|_| self.term(binders, MAX_DEPTH)).collect();
                a.con(tag, &fields)
            }
        }
    }

    /// `case s of { arms; _ => d }` with distinct arms and an optional default.
    fn case(&mut self, binders: u32, depth: u32) -> &'a Term<'a> {
        let a = self.arena;
        let scrutinee = self.term(binders, depth + 1);
        let wanted = self.byte() % 4;
        let mut arms: Vec<Arm<'a>> = Vec::new();
        for _ in 0..wanted {
            let (tag, arity) = self.pick(&TAGS);
            if arms.iter().any(|arm| arm.tag == tag) {
                continue;
            }
            let body = self.term(binders + arity, depth + 1);
            arms.push(Arm::new(a.tag(tag), arity, body));
        }
        let default = match self.byte() % 2 {
            0 => Some(self.term(binders, depth + 1)),
            _ => None,
        };
        a.case(scrutinee, &arms, default)
    }
}
