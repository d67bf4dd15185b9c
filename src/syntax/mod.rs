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
//!   character outside a string or comment is an error. Names and constructor
//!   names are ASCII.
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

mod lexer;
mod parser;
mod printer;

use std::fmt::Write as _;

use crate::host::{HostFunctions, NO_HOST};
use crate::prim::Prim;
use crate::program::Program;
use crate::term::{Arena, Term};

/// A syntax or name error, with the 1-based line and column where it was found.
///
/// The column counts characters (Unicode scalar values), not bytes. `Display`
/// writes `LINE:COL: message`; [`SyntaxError::render`] adds the file name, the
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
    /// 1-based column, in characters.
    pub column: u32,
    /// What is wrong.
    pub message: String,
}

impl SyntaxError {
    /// The error as a compiler would show it: `FILE:LINE:COL: message`, then the
    /// offending line of `source`, then a caret under the column. Tabs before
    /// the column are kept so that the caret lines up.
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
    ///     "fees.orr:2:7: unexpected `*`, expected an expression\nfee * * 2\n      ^"
    /// );
    /// ```
    pub fn render(&self, file: &str, source: &str) -> String {
        let index = usize::try_from(self.line.saturating_sub(1)).unwrap_or(usize::MAX);
        let line = source.split('\n').nth(index).unwrap_or("");
        let line = line.strip_suffix('\r').unwrap_or(line);
        let mut out = format!(
            "{file}:{}:{}: {}\n{line}\n",
            self.line, self.column, self.message
        );
        let before = usize::try_from(self.column.saturating_sub(1)).unwrap_or(usize::MAX);
        let mut chars = line.chars();
        for _ in 0..before {
            match chars.next() {
                Some('\t') => out.push('\t'),
                _ => out.push(' '),
            }
        }
        out.push('^');
        out
    }
}

/// An error found at a byte offset of the source; turned into a
/// [`SyntaxError`] with line and column only when reported.
#[derive(Clone, Debug)]
pub(crate) struct Failure {
    /// Byte offset into the source, at a character boundary.
    pub(crate) offset: usize,
    /// The message.
    pub(crate) message: String,
}

impl Failure {
    pub(crate) fn new(offset: usize, message: impl Into<String>) -> Self {
        Failure {
            offset,
            message: message.into(),
        }
    }

    fn locate(self, source: &[u8]) -> SyntaxError {
        let (line, column) = line_column(source, self.offset);
        SyntaxError {
            line,
            column,
            message: self.message,
        }
    }
}

/// The 1-based line and character column of a byte offset.
pub(crate) fn line_column(source: &[u8], offset: usize) -> (u32, u32) {
    let before = source.get(..offset).unwrap_or(source);
    let line_start = before
        .iter()
        .rposition(|&b| b == b'\n')
        .map_or(0, |i| i + 1);
    let newlines = before.iter().filter(|&&b| b == b'\n').count();
    // Count characters by their first bytes: UTF-8 continuation bytes are 0b10xxxxxx.
    let chars = before
        .get(line_start..)
        .unwrap_or(&[])
        .iter()
        .filter(|&&b| b & 0xC0 != 0x80)
        .count();
    let clamp = |n: usize| u32::try_from(n.saturating_add(1)).unwrap_or(u32::MAX);
    (clamp(newlines), clamp(chars))
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
    match std::str::from_utf8(source) {
        Ok(text) => parse(arena, text),
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

fn print_limited_with(term: &Term<'_>, max_bytes: usize, host: &HostFunctions) -> Printed {
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
