//! The text syntax of SEMANTICS §5: a parser from names to de Bruijn indices
//! (Pierce, *Types and Programming Languages*, 2002, §6.1) and a printer back to
//! names that never capture, both driven by explicit stacks so that no input
//! depth can overflow the native stack.
//!
//! # The syntax in brief
//!
//! ```text
//! # a comment runs to the end of the line
//! \x y. e   λx. e                 functions (curried)
//! rec f x y. e                    a recursive function: μλ binds f and x, then λ binds y
//! let x = e1 in e2                let f x y = e1 in e2      let rec f x y = e1 in e2
//! if c then a else b
//! Nil   Cons(h, t)   Foo()        constructors (Foo() is Foo); (Foo) x applies Foo to x
//! case e of { Nil => a; Cons(h, t) => b; _ => c }
//! 42  -7  "text\n\u{e9}"  true  false
//! ||  &&  == != < <= > >=  ++  + -  * / %  unary - and not  application
//! length s   decimal n            built-in functions
//! ```
//!
//! Operators are listed loosest first; `||`, `&&` and `++` associate to the
//! right, `+ - * / %` to the left, and comparisons do not chain. `a && b`,
//! `a || b` and `not a` are sugar for `if`. A `-` written directly against an
//! integer literal (no space between) is part of the literal, so `-7` is the
//! literal −7 and `-9223372036854775808` is `i64::MIN`; otherwise unary `-` is
//! negation. The open-ended forms (`\`, `λ`, `let`, `if`, `rec`) may start
//! wherever an operand may and extend as far to the right as possible.
//!
//! Names are resolved when parsing: the nearest enclosing binder wins, then the
//! built-in functions, and an unbound name is an error. A built-in function
//! applied to fewer arguments than it takes (or passed as a value) is
//! η-expanded into a lambda.
//!
//! # Fine points
//!
//! - Whitespace is space, tab, carriage return and line feed; any other
//!   character outside a string, comment or name is an error. A UTF-8
//!   byte-order mark at the very start of the text is skipped (byte offsets
//!   still count from the text's first byte, the mark's three included).
//! - Names are Unicode identifiers as Unicode Standard Annex #31 (*Unicode
//!   Identifiers and Syntax*, revision 39, 2023, §2) defines them: a
//!   character of `XID_Start` or `_`, then characters of `XID_Continue` (and
//!   `'`, so `rate'` is a name), so `café`, `größe` and `温室` are names. A
//!   name whose first character is upper case (`char::is_uppercase`:
//!   `Épi`, `Ωmega`) is a constructor. Keywords are the ASCII words above.
//!   `λ` is a letter to UAX #31 but here it is always the lambda, never part
//!   of a name: `λx. x` is a function and `aλb` is `a`, a lambda and `b`.
//! - Lines and columns (in [`SyntaxError`], in the [`Span`]s the parser puts
//!   on every node, and for the carets of [`excerpt`]) count from 1. A
//!   column is a display column: each character counts its width under
//!   Unicode Standard Annex #11 (*East Asian Width*), from the tables of the
//!   `unicode-width` crate, so a CJK character or an emoji counts 2 and a
//!   combining mark 0; a tab and any other control character count 1 (a tab
//!   is copied into the caret line, so the caret still lines up under any
//!   tab stops). A sequence a terminal may draw as one picture (an emoji
//!   joined by zero-width joiners) counts the sum of its characters.
//! - `- 7` (with a space) and `-(7)` are negation; only `-7` is a literal.
//!   Digits running straight into a name (`12abc`) are an error.
//! - `_` alone binds a slot nothing can refer to (`\_ x. x`, `let _ = e in b`,
//!   `Cons(_, t)`); using it as a value is an error. `_x` is an ordinary name.
//! - `not` is a prefix operator, not an argument: write `f (not x)`.
//! - Shadowing is allowed everywhere, including among the parameters of one
//!   lambda or pattern (`\x x. x` returns its second argument).
//! - `rec f x y. e` is this crate's own form for a standalone recursive
//!   function, so that the printer can write every term.
//! - The printer names binders by de Bruijn level: a name says how many
//!   binders enclose its binder, so two binders on one path never share a name
//!   and nothing can be captured. `let f x = e` is printed as
//!   `let a = \a. e` (the function is not in scope in its own body, so its
//!   name and its parameter's are both level-numbered from the same depth).
//!
//! # Spans and names
//!
//! Every node the parser builds carries the [`Span`] of the source it comes
//! from ([`crate::Term::span`]): file 0, its byte range, and the line and
//! display column of its start. An application `f a b` is two nodes, `f a`
//! and `f a b`, each from `f` to the end of its last argument; an operator
//! `100 / n` spans from `100` to `n`; a `let` from `let` to the end of its
//! body; parentheses belong to the span of what contains them, not of what
//! they enclose. Nodes the syntax stands for without writing them get the
//! span of what they stand for: `a && b`, `a || b` and `not a` (the `if`
//! and its boolean), a built-in function passed as a value (its lambdas, at
//! the name), the lambdas of `\x y. e` (the whole lambda) and of
//! `let f x y = e` (from `f` to the end of `e`).
//!
//! Functions are named for backtraces ([`crate::Term::name`]):
//! `let f = \x. e`, `let f x y = e`, `let rec f x = e` and `rec f x. e`
//! name the function `f`. The sugared forms name each lambda of the curried
//! chain; in `let f = \x y. e` the outer lambda is named and a program
//! gives its name to the rest of the chain ([`crate::Arena::named`]). Only
//! lambdas are named: `let n = 5` names nothing.

mod lexer;
mod parser;
mod printer;

use std::fmt::Write as _;

use unicode_width::UnicodeWidthChar;

use crate::host::{HostFunctions, NO_HOST};
use crate::prim::Prim;
use crate::program::Program;
use crate::span::Span;
use crate::term::{Arena, Term};

/// A syntax or name error, with the 1-based line and column where it was found.
///
/// The column is a display column (a CJK character or an emoji counts 2, a
/// tab 1; see the module's fine points), not a byte count. `Display` writes
/// `LINE:COL: message`; [`SyntaxError::render`] adds the file name, the
/// offending line and a caret, as the command line prints it.
///
/// # Examples
///
/// ```
/// use orrery::{parse, Arena};
/// let arena = Arena::new();
/// let err = parse(&arena, "let total = 3 in\n  totl + 1").unwrap_err();
/// assert_eq!((err.line, err.column), (2, 3));
/// assert_eq!(err.to_string(), "2:3: unbound name `totl`");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{line}:{column}: {message}")]
pub struct SyntaxError {
    /// 1-based line.
    pub line: u32,
    /// 1-based column, in display width.
    pub column: u32,
    /// What is wrong.
    pub message: String,
    /// When the error is unbound names: every one, once, in the order of
    /// first use, with the line and column of that use. Empty otherwise.
    pub unbound: Vec<(String, u32, u32)>,
}

impl SyntaxError {
    /// The error as a compiler would show it: `FILE:LINE:COL: message`, then
    /// the offending line of `source` and a caret under the column, as
    /// [`excerpt`] shows them (a long line is cut to a window around the
    /// column). Every line ends with a newline.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse, Arena};
    /// let arena = Arena::new();
    /// let source = "let fee = 12 in\nfee * * 2";
    /// let err = parse(&arena, source).unwrap_err();
    /// assert_eq!(
    ///     err.render("fees.orr", source),
    ///     "fees.orr:2:7: unexpected `*`, expected an expression\nfee * * 2\n      ^\n"
    /// );
    /// ```
    pub fn render(&self, file: &str, source: &str) -> String {
        let at = Span::new(0, 0, 0).with_position(self.line, self.column);
        format!(
            "{file}:{}:{}: {}\n{}",
            self.line,
            self.column,
            self.message,
            excerpt(source, at)
        )
    }
}

/// The most display columns of a source line that [`excerpt`] shows: a
/// longer line is cut to a window of this many around the place pointed at.
///
/// # Examples
///
/// ```
/// use orrery::{syntax::{excerpt, EXCERPT_COLUMNS}, Span};
/// let line = "x".repeat(3 * EXCERPT_COLUMNS);
/// let shown = excerpt(&line, Span::new(0, 0, 0).with_position(1, 100));
/// assert!(shown.lines().next().unwrap().chars().count() <= EXCERPT_COLUMNS + 2);
/// ```
pub const EXCERPT_COLUMNS: usize = 80;

/// The source line a span starts on, and under it a caret line: `^` under
/// the span's first column and on across its display width (cut at the
/// line's end, so a span over several lines underlines the rest of its
/// first), or one `^` when the span is a bare position (`start == end`).
/// Both lines end with a newline. A span with no line (0), as a language
/// lowered through the builder gives them, is placed by its first byte
/// ([`position`]); one that is not in `source` gives `""`.
///
/// The span's `line` and `col` place the caret (as the parser counts them:
/// display columns, see the module's fine points); its byte range, read in
/// `source`, gives the underline's width. Tabs before the caret are copied
/// into the caret line so that it lines up under any tab stops. A line wider
/// than [`EXCERPT_COLUMNS`] is cut to that many columns around the caret,
/// with `…` where it was cut, and the caret still under its character.
/// Control characters other than tab are shown as `\u{FFFD}` (both are one
/// column wide), so an excerpt cannot send a terminal escape sequences. This
/// is what [`SyntaxError::render`] and the command line's runtime errors
/// print.
///
/// # Examples
///
/// ```
/// use orrery::{syntax::excerpt, Span};
/// let source = "let share = \\n. 100 / n in\nshare 0";
/// // `100 / n`: bytes 17..24, line 1, column 17.
/// let span = Span::new(0, 17, 24).with_position(1, 17);
/// assert_eq!(
///     excerpt(source, span),
///     "let share = \\n. 100 / n in\n                ^^^^^^^\n"
/// );
/// // A CJK name is two columns a character wide.
/// let source = "let 温室 = 0 in 1 / 温室";
/// let span = Span::new(0, 18, 28).with_position(1, 17); // `1 / 温室`
/// assert_eq!(excerpt(source, span), format!("{source}\n{}^^^^^^^^\n", " ".repeat(16)));
/// ```
pub fn excerpt(source: &str, span: Span) -> String {
    let span = if span.line == 0 {
        match position(source, span.start) {
            Some((line, col)) => span.with_position(line, col),
            None => return String::new(),
        }
    } else {
        span
    };
    let index = usize::try_from(span.line - 1).unwrap_or(usize::MAX);
    let line = source.split('\n').nth(index).unwrap_or("");
    let line = line.strip_suffix('\r').unwrap_or(line);
    let line = match index {
        0 => line.strip_prefix('\u{feff}').unwrap_or(line),
        _ => line,
    };
    let cols = EXCERPT_COLUMNS as u64;
    let total: u64 = line.chars().map(|c| u64::from(char_width(c))).sum();
    // A column past the line's end (the end of the input) puts the caret
    // just after it.
    let caret = u64::from(span.col.max(1) - 1).min(total);
    // The window of display columns shown: the whole line, or `cols` of it
    // with the caret a third of the way in (or as far in as the line's end
    // makes it).
    let (lo, hi) = if total <= cols {
        (0, total)
    } else {
        let lo = caret.saturating_sub(cols / 3).min(total - cols);
        (lo, lo + cols)
    };
    let mut text = String::new();
    let mut marks = String::new();
    if lo > 0 {
        text.push('…');
        marks.push(' ');
    }
    let (mut at, mut padded) = (0u64, lo);
    let mut cut = false;
    for c in line.chars() {
        let width = u64::from(char_width(c));
        let start = at;
        at += width;
        if start < lo {
            continue;
        }
        if at > hi {
            cut = true;
            break;
        }
        text.push(if c.is_control() && c != '\t' {
            '\u{FFFD}'
        } else {
            c
        });
        if start < caret {
            match c {
                '\t' => marks.push('\t'),
                _ => marks.extend(std::iter::repeat(' ').take(width as usize)),
            }
            padded = at;
        }
    }
    if cut {
        text.push('…');
    }
    // A caret at the line's end sits after it.
    marks.extend(std::iter::repeat(' ').take(caret.saturating_sub(padded) as usize));
    let room = hi.saturating_sub(caret).max(1);
    let carets = underline_width(source, span).min(room);
    marks.extend(std::iter::repeat('^').take(carets as usize));
    format!("{text}\n{marks}\n")
}

/// The line and display column (both from 1, counted as the parser counts
/// them) of byte `offset` of `source`, or `None` past its end or inside a
/// character: what a language with spans of its own needs to place a byte
/// range ([`Span::new`]) in its text, and what [`excerpt`] uses for a span
/// with no line.
///
/// # Examples
///
/// ```
/// use orrery::syntax::position;
/// let source = "rate = 4\nbeds = 温室 / 0";
/// assert_eq!(position(source, 0), Some((1, 1)));
/// assert_eq!(position(source, 16), Some((2, 8)));  // 温
/// assert_eq!(position(source, 23), Some((2, 13))); // `/`, after two wide characters
/// assert_eq!(position(source, 17), None); // inside 温
/// ```
pub fn position(source: &str, offset: u32) -> Option<(u32, u32)> {
    let offset = usize::try_from(offset).ok()?;
    if offset > source.len() || !source.is_char_boundary(offset) {
        return None;
    }
    let before = &source[..offset];
    let line_start = before.rfind('\n').map_or(0, |k| k + 1);
    let line = before.matches('\n').count() + 1;
    let mut head = &before[line_start..];
    if line_start == 0 {
        head = head.strip_prefix('\u{feff}').unwrap_or(head);
    }
    let col: u64 = head.chars().map(|c| u64::from(char_width(c))).sum::<u64>() + 1;
    Some((u32::try_from(line).ok()?, u32::try_from(col).ok()?))
}

/// How many columns a span's underline takes: the display width of its
/// bytes up to the end of its first line, at least 1.
fn underline_width(source: &str, span: Span) -> u64 {
    let range = usize::try_from(span.start)
        .ok()
        .zip(usize::try_from(span.end).ok());
    let text = match range {
        Some((start, end)) if start < end => source.get(start..end).unwrap_or(""),
        _ => "",
    };
    let first = text.split('\n').next().unwrap_or("");
    let first = first.strip_suffix('\r').unwrap_or(first);
    first
        .chars()
        .map(|c| u64::from(char_width(c)))
        .sum::<u64>()
        .max(1)
}

/// The display width of a character, as columns are counted: its East Asian
/// Width (Unicode Standard Annex #11) from the `unicode-width` crate's
/// tables — 2 for wide and fullwidth characters, 0 for combining and other
/// zero-width ones, else 1 — and 1 for a tab or any other control character.
#[inline]
pub(crate) fn char_width(c: char) -> u32 {
    if c.is_ascii() {
        return 1;
    }
    c.width().map_or(1, |w| u32::try_from(w).unwrap_or(1))
}

/// An error found at a byte offset of the source; turned into a
/// [`SyntaxError`] with line and column only when reported.
#[derive(Clone, Debug)]
pub(crate) struct Failure {
    /// Byte offset into the source, at a character boundary.
    pub(crate) offset: usize,
    /// The message.
    pub(crate) message: String,
    /// The unbound names it is about, each with the offset of its first use.
    pub(crate) unbound: Vec<(String, usize)>,
}

impl Failure {
    pub(crate) fn new(offset: usize, message: impl Into<String>) -> Self {
        Failure {
            offset,
            message: message.into(),
            unbound: Vec::new(),
        }
    }

    fn locate(self, source: &[u8]) -> SyntaxError {
        let (line, column) = line_column(source, self.offset);
        let places = line_columns(source, self.unbound.iter().map(|&(_, at)| at));
        let unbound = self
            .unbound
            .into_iter()
            .zip(places)
            .map(|((name, _), (line, column))| (name, line, column))
            .collect();
        SyntaxError {
            line,
            column,
            message: self.message,
            unbound,
        }
    }
}

/// The 1-based line and display column of a byte offset (at a character
/// boundary; the bytes before it are UTF-8, as far as an invalid encoding
/// lets them be). Counts as the lexer's positions do.
pub(crate) fn line_column(source: &[u8], offset: usize) -> (u32, u32) {
    let before = source.get(..offset).unwrap_or(source);
    let line_start = before
        .iter()
        .rposition(|&b| b == b'\n')
        .map_or(0, |i| i + 1);
    let newlines = before.iter().filter(|&&b| b == b'\n').count() as u64;
    let prefix = String::from_utf8_lossy(before.get(line_start..).unwrap_or(&[]));
    let width: u64 = prefix.chars().map(|c| u64::from(char_width(c))).sum();
    let clamp = |n: u64| u32::try_from(n.saturating_add(1)).unwrap_or(u32::MAX);
    (clamp(newlines), clamp(width))
}

/// [`line_column`] of many offsets in one pass over the source (so a
/// million unbound names in a long line cost one reading of it): each
/// offset's place, in the order given. Offsets are visited in increasing
/// order; one smaller than the one before starts the count again.
pub(crate) fn line_columns(source: &[u8], offsets: impl Iterator<Item = usize>) -> Vec<(u32, u32)> {
    let clamp = |n: u64| u32::try_from(n.saturating_add(1)).unwrap_or(u32::MAX);
    let (mut at, mut newlines, mut width) = (0usize, 0u64, 0u64);
    let mut places = Vec::new();
    for offset in offsets {
        let offset = offset.min(source.len());
        if offset < at {
            (at, newlines, width) = (0, 0, 0);
        }
        let segment = String::from_utf8_lossy(&source[at..offset]);
        for c in segment.chars() {
            if c == '\n' {
                newlines += 1;
                width = 0;
            } else {
                width += u64::from(char_width(c));
            }
        }
        at = offset;
        places.push((clamp(newlines), clamp(width)));
    }
    places
}

/// `LINE:COL` of a byte offset, for messages that point at a second place.
pub(crate) fn place(source: &str, offset: usize) -> String {
    let (line, column) = line_column(source.as_bytes(), offset);
    format!("{line}:{column}")
}

/// What a call by name becomes: a primitive with its arity.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Function {
    /// The primitive a saturated call becomes.
    pub(crate) prim: Prim,
    /// The number of arguments a call takes.
    pub(crate) arity: usize,
}

/// A function with the name source text calls it by.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Named<'h> {
    /// The name: a lower-case identifier, not a keyword.
    pub(crate) name: &'h str,
    /// The number of arguments a call takes.
    pub(crate) arity: usize,
}

/// The built-in functions that are called by name (the operators have their
/// own syntax).
const BUILTIN_FUNCTIONS: [(&str, Prim); 2] = [("length", Prim::Length), ("decimal", Prim::Decimal)];

/// The table of functions known by name, consulted after local bindings: the
/// built-ins and any host functions.
#[derive(Clone, Debug)]
pub(crate) struct Functions<'h> {
    entries: Vec<(&'h str, Function)>,
}

impl<'h> Functions<'h> {
    /// The built-in functions: `length` and `decimal`.
    pub(crate) fn builtin() -> Self {
        Functions {
            entries: BUILTIN_FUNCTIONS
                .iter()
                .map(|&(name, prim)| {
                    let arity = prim.arity();
                    (name, Function { prim, arity })
                })
                .collect(),
        }
    }

    /// The built-ins and the functions of `host`.
    pub(crate) fn with_host(host: &'h HostFunctions) -> Self {
        let mut functions = Functions::builtin();
        functions.entries.extend(host.iter().map(|(name, id)| {
            let prim = Prim::Host(id);
            (
                name,
                Function {
                    prim,
                    arity: id.arity(),
                },
            )
        }));
        functions
    }

    /// The function with this name.
    pub(crate) fn lookup(&self, name: &str) -> Option<Function> {
        self.entries
            .iter()
            .find(|(n, _)| *n == name)
            .map(|(_, f)| *f)
    }

    /// The name a primitive is called by, if it has one.
    pub(crate) fn by_prim(&self, prim: Prim) -> Option<Named<'h>> {
        self.entries
            .iter()
            .find(|(_, f)| f.prim == prim)
            .map(|&(name, f)| Named {
                name,
                arity: f.arity,
            })
    }
}

/// The most bytes [`print`](fn@print) writes before it cuts the text short (1 MiB).
///
/// # Examples
///
/// ```
/// use orrery::{print, Arena, PRINT_LIMIT};
/// let arena = Arena::new();
/// let long = arena.string(&"z".repeat(PRINT_LIMIT + 10));
/// assert!(print(long).ends_with(" …[truncated]"));
/// ```
pub const PRINT_LIMIT: usize = 1 << 20;

/// The marker appended to a printed term that was cut short.
const TRUNCATED: &str = " …[truncated]";

/// A printed term, possibly cut short; see [`print_limited`].
///
/// # Examples
///
/// ```
/// use orrery::{print_limited, Arena};
/// let arena = Arena::new();
/// let printed = print_limited(arena.int(12345), 3);
/// assert_eq!(printed.text, "123 …[truncated]");
/// assert!(printed.truncated);
/// ```
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Printed {
    /// The text. When `truncated`, it is the first bytes of the full text (at
    /// most the limit, cut at a character boundary) followed by ` …[truncated]`.
    pub text: String,
    /// Whether the full text was longer than the limit.
    pub truncated: bool,
}

/// Parse and validate a whole program.
///
/// Names are resolved to de Bruijn indices as they are read, so the program is
/// closed by construction; constructor arities and case arms are checked too.
/// The term is built in `arena` on the way; the program owns everything it
/// needs and does not borrow the arena ([`Program::parse`] needs none).
///
/// # Errors
///
/// A [`SyntaxError`] with the line and column of the first problem found: a
/// malformed token, an unexpected token, an unbound name, a constructor used
/// with two arities, two arms for one constructor, an integer out of range.
///
/// # Examples
///
/// ```
/// use orrery::{parse, Arena};
/// let arena = Arena::new();
/// let program = parse(&arena, "let double x = x * 2 in double 21").unwrap();
/// assert!(program.host_names().is_empty());
/// assert!(parse(&arena, "double 21").is_err());
/// ```
pub fn parse(arena: &Arena, source: &str) -> Result<Program, SyntaxError> {
    parse_with(arena, source, &NO_HOST)
}

/// Parse and validate a whole program that may call the host functions of
/// `host` by name, like the built-ins: `f a b` calls `f` with two arguments,
/// and a partial call `f a` is a function waiting for the rest.
///
/// # Errors
///
/// As for [`parse`].
///
/// # Examples
///
/// ```
/// use orrery::{parse_with, Arena, HostFunctions};
/// let mut host = HostFunctions::new();
/// host.register("frost_risk", |low: i64, wind: i64| Ok::<_, String>(low < 2 && wind < 10)).unwrap();
/// let arena = Arena::new();
/// assert!(parse_with(&arena, "if frost_risk 1 4 then \"cover\" else \"open\"", &host).is_ok());
/// assert!(parse_with(&arena, "frost_risk", &HostFunctions::new()).is_err());
/// ```
pub fn parse_with(
    arena: &Arena,
    source: &str,
    host: &HostFunctions,
) -> Result<Program, SyntaxError> {
    let term = parse_term_with(arena, source, host)?;
    // The parser establishes every invariant `Program::with_host` checks; a
    // failure here would be a parser bug, reported rather than panicked on.
    Program::with_host(term, host).map_err(invalid_parse)
}

/// The error for a parsed term that is not a valid program (a parser bug).
fn invalid_parse(error: crate::ValidationError) -> SyntaxError {
    SyntaxError {
        line: 1,
        column: 1,
        message: format!("internal error: the parsed term is invalid: {error}"),
        unbound: Vec::new(),
    }
}

/// Parse a whole program that may call `host`'s functions, returning its
/// term (in `arena`).
fn parse_term_with<'a>(
    arena: &'a Arena,
    source: &str,
    host: &HostFunctions,
) -> Result<&'a Term<'a>, SyntaxError> {
    parser::Parser::new(arena, source, Functions::with_host(host))
        .parse()
        .map_err(|failure| failure.locate(source.as_bytes()))
}

/// Parse and validate a whole program, returning its term.
///
/// # Errors
///
/// As for [`parse`].
///
/// # Examples
///
/// ```
/// use orrery::{parse_term, Arena};
/// let arena = Arena::new();
/// let t = parse_term(&arena, "\\x. x").unwrap();
/// assert!(t == arena.lam(arena.var(0)));
/// ```
pub fn parse_term<'a>(arena: &'a Arena, source: &str) -> Result<&'a Term<'a>, SyntaxError> {
    let term = parse_term_with(arena, source, &NO_HOST)?;
    crate::validate(term).map_err(invalid_parse)?;
    Ok(term)
}

/// Parse and validate a program given as bytes, which must be UTF-8.
///
/// # Errors
///
/// A [`SyntaxError`] at the line and column of the first byte that is not
/// valid UTF-8, or any error of [`parse`].
///
/// # Examples
///
/// ```
/// use orrery::{parse_bytes, Arena};
/// let arena = Arena::new();
/// assert!(parse_bytes(&arena, b"1 + 2").is_ok());
/// let err = parse_bytes(&arena, b"1 +\n \xff").unwrap_err();
/// assert_eq!((err.line, err.column), (2, 2));
/// ```
pub fn parse_bytes(arena: &Arena, source: &[u8]) -> Result<Program, SyntaxError> {
    parse_bytes_with(arena, source, &NO_HOST)
}

/// [`parse_bytes`] for a program that may call the host functions of
/// `host` by name (see [`parse_with`]).
///
/// # Errors
///
/// As [`parse_bytes`] and [`parse_with`].
///
/// # Examples
///
/// ```
/// use orrery::{parse_bytes_with, Arena, HostFunctions};
/// let mut host = HostFunctions::new();
/// host.register("tide", |n: i64| Ok::<_, String>(n)).unwrap();
/// let arena = Arena::new();
/// assert!(parse_bytes_with(&arena, b"tide 3", &host).is_ok());
/// let err = parse_bytes_with(&arena, b"tide\n \xff", &host).unwrap_err();
/// assert_eq!((err.line, err.column), (2, 2));
/// ```
pub fn parse_bytes_with(
    arena: &Arena,
    source: &[u8],
    host: &HostFunctions,
) -> Result<Program, SyntaxError> {
    match std::str::from_utf8(source) {
        Ok(text) => parse_with(arena, text, host),
        Err(error) => {
            let failure = Failure::new(error.valid_up_to(), "invalid UTF-8");
            Err(failure.locate(source))
        }
    }
}

/// Print a term in the text syntax, cut short after [`PRINT_LIMIT`] bytes with
/// ` …[truncated]` appended.
///
/// For a closed term whose constructor tags are capitalised names, parsing the
/// result gives the same de Bruijn term. Binders are named from their depth
/// (`a` … `z`, then `a1` …), so names never capture. A free variable of an open
/// term prints as `#k`, its index counted from outside the whole term, and a
/// primitive with the wrong number of operands as `#op(…)`; neither parses.
/// Time is linear in the output, so a term with heavy sharing prints quickly.
///
/// # Examples
///
/// ```
/// use orrery::{parse_term, print, Arena};
/// let arena = Arena::new();
/// let t = parse_term(&arena, "let twice f x = f (f x) in twice (\\n. n + 1) 0").unwrap();
/// let text = print(t);
/// assert_eq!(text, "let a = \\a b. a (a b) in a (\\b. b + 1) 0");
/// assert!(parse_term(&arena, &text).unwrap() == t);
/// ```
pub fn print(term: &Term<'_>) -> String {
    print_limited(term, PRINT_LIMIT).text
}

/// Print a term like [`print`](fn@print), writing at most `max_bytes` bytes of it.
///
/// Printing stops as soon as the limit is passed, so it takes time linear in
/// `max_bytes` however large the term's unfolding is.
///
/// # Examples
///
/// ```
/// use orrery::{print_limited, Arena};
/// let arena = Arena::new();
/// let pair = arena.con("Pair", &[arena.int(1), arena.string("one")]);
/// let full = print_limited(pair, 100);
/// assert_eq!(full.text, "Pair(1, \"one\")");
/// assert!(!full.truncated);
/// assert_eq!(print_limited(pair, 5).text, "Pair( …[truncated]");
/// ```
pub fn print_limited(term: &Term<'_>, max_bytes: usize) -> Printed {
    print_limited_with(term, max_bytes, &NO_HOST)
}

/// [`print`](fn@print) for a term that calls the host functions of `host`:
/// their calls are written by name. ([`print`](fn@print) writes a host call
/// as `host_function#N(…)`, which does not parse.)
///
/// # Examples
///
/// ```
/// use orrery::{parse_with, print_with, Arena, HostFunctions};
/// let mut host = HostFunctions::new();
/// host.register("shade", |hour: i64| Ok::<_, String>(hour > 11)).unwrap();
/// let arena = Arena::new();
/// let program = parse_with(&arena, "\\h. shade (h + 1)", &host).unwrap();
/// assert_eq!(print_with(program.to_term(&arena), &host), "\\a. shade (a + 1)");
/// ```
pub fn print_with(term: &Term<'_>, host: &HostFunctions) -> String {
    print_limited_with(term, PRINT_LIMIT, host).text
}

/// [`print_limited`] for a term that calls the host functions of `host`,
/// written by name as [`print_with`] writes them.
///
/// # Examples
///
/// ```
/// use orrery::{parse_with, print_limited_with, Arena, HostFunctions};
/// let mut host = HostFunctions::new();
/// host.register("shade", |hour: i64| Ok::<_, String>(hour > 11)).unwrap();
/// let arena = Arena::new();
/// let program = parse_with(&arena, "\\h. shade h", &host).unwrap();
/// let printed = print_limited_with(program.to_term(&arena), 9, &host);
/// assert!(printed.truncated && printed.text.starts_with("\\a. shade"));
/// ```
pub fn print_limited_with(term: &Term<'_>, max_bytes: usize, host: &HostFunctions) -> Printed {
    let functions = Functions::with_host(host);
    let mut text = printer::Printer::new(&functions, max_bytes).run(term);
    let truncated = text.len() > max_bytes;
    if truncated {
        let mut cut = max_bytes;
        while !text.is_char_boundary(cut) {
            cut -= 1;
        }
        text.truncate(cut);
        let _ = write!(text, "{TRUNCATED}");
    }
    Printed { text, truncated }
}

#[cfg(test)]
mod tests {
    use super::{line_column, line_columns};

    #[test]
    fn places_in_one_pass_are_the_places_one_by_one() {
        let source = "ab\n日本 x\n\n  🙂 yz\r\nend".as_bytes();
        let offsets: Vec<usize> = (0..=source.len())
            .filter(|&i| std::str::from_utf8(&source[..i]).is_ok())
            .collect();
        let one_by_one: Vec<(u32, u32)> = offsets.iter().map(|&i| line_column(source, i)).collect();
        assert_eq!(line_columns(source, offsets.iter().copied()), one_by_one);
        // Out of order, the count starts again.
        let back = [offsets[9], offsets[2]];
        assert_eq!(
            line_columns(source, back.iter().copied()),
            [line_column(source, back[0]), line_column(source, back[1])]
        );
    }
}
