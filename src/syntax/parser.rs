//! The parser of the text syntax: Dijkstra's shunting-yard operator-precedence
//! algorithm (1961) run inside an explicit pushdown automaton, one frame per
//! open construct, so nesting depth costs heap, never native stack. Names become
//! de Bruijn indices as they are read (Pierce, *TAPL*, 2002, §6.1). Every
//! node is built with the span of its source text (see the module comment of
//! `syntax`): each operand on the stack keeps the extent it was read from.

use hashbrown::hash_map::Entry;
use hashbrown::{HashMap, HashSet};
use smallvec::SmallVec;

use super::lexer::{Keyword, Lexer, Pos, Tok, Token};
use super::{place, Failure, Function, Functions};
use crate::prim::Prim;
use crate::span::Span;
use crate::term::{Arena, Arm, Node, Term};

type Parsed<T> = Result<T, Failure>;

/// Binding power of the unary operators `-` and `not`: above every binary
/// operator, below application (which the parser handles directly).
const UNARY: u8 = 7;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Assoc {
    Left,
    Right,
    /// Comparisons: `a < b < c` is an error.
    None,
}

/// What an operator builds when it is reduced.
#[derive(Clone, Copy, Debug)]
enum OpKind {
    Or,
    And,
    Binary(Prim),
    Negate,
    Not,
}

/// An operator waiting on the operator stack, and where it is (a prefix
/// operator's span starts there).
#[derive(Clone, Copy, Debug)]
struct Operator {
    kind: OpKind,
    precedence: u8,
    at: Pos,
}

/// The span of the source from `from` to byte `end`, in file 0. Offsets
/// past `u32::MAX` are clamped to it.
fn span(from: Pos, end: usize) -> Span {
    let clamp = |n: usize| u32::try_from(n).unwrap_or(u32::MAX);
    Span {
        file: 0,
        start: clamp(from.byte),
        end: clamp(end),
        line: from.line,
        col: from.col,
    }
}

fn binary_operator(tok: Tok<'_>) -> Option<(OpKind, u8, Assoc)> {
    Some(match tok {
        Tok::OrOr => (OpKind::Or, 1, Assoc::Right),
        Tok::AndAnd => (OpKind::And, 2, Assoc::Right),
        Tok::EqEq => (OpKind::Binary(Prim::Eq), 3, Assoc::None),
        Tok::NotEq => (OpKind::Binary(Prim::Ne), 3, Assoc::None),
        Tok::Lt => (OpKind::Binary(Prim::Lt), 3, Assoc::None),
        Tok::Le => (OpKind::Binary(Prim::Le), 3, Assoc::None),
        Tok::Gt => (OpKind::Binary(Prim::Gt), 3, Assoc::None),
        Tok::Ge => (OpKind::Binary(Prim::Ge), 3, Assoc::None),
        Tok::PlusPlus => (OpKind::Binary(Prim::Concat), 4, Assoc::Right),
        Tok::Plus => (OpKind::Binary(Prim::Add), 5, Assoc::Left),
        Tok::Minus => (OpKind::Binary(Prim::Sub), 5, Assoc::Left),
        Tok::Star => (OpKind::Binary(Prim::Mul), 6, Assoc::Left),
        Tok::Slash => (OpKind::Binary(Prim::Div), 6, Assoc::Left),
        Tok::Percent => (OpKind::Binary(Prim::Rem), 6, Assoc::Left),
        _ => return None,
    })
}

/// Whether a token, after a complete operand, starts an argument to apply it to.
fn starts_argument(tok: Tok<'_>) -> bool {
    matches!(
        tok,
        Tok::Name(_)
            | Tok::Underscore
            | Tok::Con(_)
            | Tok::Int(_)
            | Tok::Str { .. }
            | Tok::LParen
            | Tok::Lambda
            | Tok::Keyword(
                Keyword::True
                    | Keyword::False
                    | Keyword::Case
                    | Keyword::Let
                    | Keyword::If
                    | Keyword::Rec
            )
    )
}

/// An entry of the operand stack: a term, or a named function still
/// collecting its arguments (it becomes a primitive once saturated), with
/// the extent of the source it was read from (`from` to byte `end`; for a
/// parenthesised operand, the parentheses included).
#[derive(Clone, Debug)]
enum Pending<'a> {
    Term {
        term: &'a Term<'a>,
        from: Pos,
        end: usize,
    },
    Partial {
        function: Function,
        /// Each argument with the end of its source.
        args: SmallVec<[(&'a Term<'a>, usize); 2]>,
        /// Where the function's name is.
        from: Pos,
        name_end: usize,
    },
}

/// A term read from `from` to byte `end`.
type Extent<'a> = (&'a Term<'a>, Pos, usize);

/// What to do when the expression a frame is reading comes to its end.
#[derive(Clone, Copy, Debug)]
enum Kind<'s, 'a> {
    /// The whole program: ends at end of input.
    Top,
    /// `( e )`, opened at `open`.
    Paren {
        open: Pos,
    },
    /// `\x1 … xn. e`, the `\` at `from`.
    Lambda {
        params: u32,
        from: Pos,
    },
    /// `rec f x1 … xn. e`: μλ binds f and x1, then n−1 λs; `rec` at `from`.
    Rec {
        params: u32,
        name: Option<&'s str>,
        from: Pos,
    },
    /// `let [rec] name params = e` awaiting `in`: `let` at `keyword`, the
    /// name at `def`.
    LetBound {
        name: Option<&'s str>,
        params: u32,
        rec: bool,
        keyword: Pos,
        def: Pos,
    },
    /// `let … in e`.
    LetBody {
        bound: &'a Term<'a>,
        keyword: Pos,
    },
    IfCondition {
        keyword: Pos,
    },
    IfThen {
        condition: &'a Term<'a>,
        keyword: Pos,
    },
    IfElse {
        condition: &'a Term<'a>,
        then: &'a Term<'a>,
        keyword: Pos,
    },
    /// `case e of`.
    Scrutinee {
        keyword: Pos,
    },
    /// The body of an arm of the innermost open case; `None` is the `_` arm.
    ArmBody {
        pattern: Option<(&'a str, u32)>,
    },
    /// A field of `Tag( … )`; earlier fields are on the field stack from `base`.
    Field {
        tag: &'s str,
        at: Pos,
        base: usize,
    },
}

/// One open construct: its kind and the state of the expression inside it,
/// whose operands and operators sit on the shared stacks above the bases.
#[derive(Clone, Copy, Debug)]
struct Construct<'s, 'a> {
    kind: Kind<'s, 'a>,
    operands: usize,
    operators: usize,
    /// Whether an operand has just been completed (so a following atom is an
    /// argument and `-` is binary).
    after_operand: bool,
}

/// A `case` whose arms are being read; its arms sit on the arm stack from `arms`.
#[derive(Clone, Copy, Debug)]
struct OpenCase<'a> {
    scrutinee: &'a Term<'a>,
    arms: usize,
    default: Option<&'a Term<'a>>,
    id: u32,
    /// Where `case` is.
    keyword: Pos,
}

/// A constructor tag seen in the program: its arena copy, arity and first use.
#[derive(Clone, Copy, Debug)]
struct TagUse<'a> {
    tag: &'a str,
    arity: u32,
    at: usize,
}

/// The names in scope, innermost last, with an index from each name to its
/// innermost binder so lookups are O(1) however deep the nesting.
#[derive(Default)]
struct Bindings<'s> {
    /// Each binder's name and the depth of the binder it shadows.
    binders: Vec<(Option<&'s str>, Option<u32>)>,
    innermost: HashMap<&'s str, u32>,
}

impl<'s> Bindings<'s> {
    fn push(&mut self, name: Option<&'s str>, at: usize) -> Parsed<()> {
        let depth = u32::try_from(self.binders.len())
            .map_err(|_| Failure::new(at, "too many nested binders"))?;
        let shadowed = name.and_then(|n| self.innermost.insert(n, depth));
        self.binders.push((name, shadowed));
        Ok(())
    }

    fn pop(&mut self, count: u32) {
        for _ in 0..count {
            if let Some((Some(name), shadowed)) = self.binders.pop() {
                match shadowed {
                    Some(depth) => self.innermost.insert(name, depth),
                    None => self.innermost.remove(name),
                };
            }
        }
    }

    /// The de Bruijn index of a name, if a binder in scope has it.
    fn lookup(&self, name: &str) -> Option<u32> {
        let depth = *self.innermost.get(name)?;
        let len = u32::try_from(self.binders.len()).ok()?;
        len.checked_sub(depth)?.checked_sub(1)
    }
}

/// The parser's whole state; see the module comment.
pub(super) struct Parser<'s, 'a> {
    arena: &'a Arena,
    text: &'s str,
    lexer: Lexer<'s>,
    token: Token<'s>,
    functions: Functions<'s>,
    frames: Vec<Construct<'s, 'a>>,
    operands: Vec<Pending<'a>>,
    operators: Vec<Operator>,
    fields: Vec<&'a Term<'a>>,
    arms: Vec<Arm<'a>>,
    cases: Vec<OpenCase<'a>>,
    next_case: u32,
    /// `(case id, tag)` of every arm of every open case, to reject duplicates.
    arm_tags: HashSet<(u32, &'a str)>,
    tags: HashMap<&'s str, TagUse<'a>>,
    scope: Bindings<'s>,
    /// Each name found unbound, once, with where it was first used; the
    /// parse goes on past them so that all are reported together.
    unbound: Vec<(&'s str, usize)>,
    unbound_seen: HashSet<&'s str>,
}

/// At most this many unbound names are named in the error's message.
const UNBOUND_SHOWN: usize = 32;

fn expected(what: &str, token: &Token<'_>) -> Failure {
    let message = match token.tok {
        Tok::Eof => format!("unexpected end of input, expected {what}"),
        tok => format!("expected {what}, found {}", tok.describe()),
    };
    Failure::new(token.start, message)
}

fn unexpected(token: &Token<'_>, expecting: &str) -> Failure {
    Failure::new(
        token.start,
        format!("unexpected {}, expected {expecting}", token.tok.describe()),
    )
}

fn bug(at: usize) -> Failure {
    Failure::new(at, "internal error: the parser's stacks are inconsistent")
}

/// The value of a decimal literal, negated when `negative`; `None` when it does
/// not fit in an `i64`.
fn integer(digits: &str, negative: bool) -> Option<i64> {
    let mut magnitude: u64 = 0;
    for b in digits.bytes() {
        magnitude = magnitude
            .checked_mul(10)?
            .checked_add(u64::from(b.wrapping_sub(b'0')))?;
    }
    if negative {
        0i64.checked_sub_unsigned(magnitude)
    } else {
        i64::try_from(magnitude).ok()
    }
}

impl<'s, 'a> Parser<'s, 'a> {
    pub(super) fn new(arena: &'a Arena, text: &'s str, functions: Functions<'s>) -> Self {
        Parser {
            arena,
            text,
            lexer: Lexer::new(text),
            token: Token {
                tok: Tok::Eof,
                start: 0,
                end: 0,
                line: 1,
                col: 1,
            },
            functions,
            frames: Vec::new(),
            operands: Vec::new(),
            operators: Vec::new(),
            fields: Vec::new(),
            arms: Vec::new(),
            cases: Vec::new(),
            next_case: 0,
            arm_tags: HashSet::new(),
            tags: HashMap::new(),
            scope: Bindings::default(),
            unbound: Vec::new(),
            unbound_seen: HashSet::new(),
        }
    }

    /// Parse the whole source as one term.
    /// The whole source as one term. Unbound names are collected as the
    /// parse goes; the error is the one that comes first in the source: an
    /// unbound name (naming every unbound name found), or the malformed
    /// syntax that stopped the parse.
    pub(super) fn parse(mut self) -> Parsed<&'a Term<'a>> {
        let parsed = self.parse_all();
        match self.unbound.first() {
            Some(&(_, at)) => match parsed {
                Err(failure) if failure.offset < at => Err(failure),
                _ => Err(Failure {
                    unbound: self
                        .unbound
                        .iter()
                        .map(|&(name, at)| (name.to_string(), at))
                        .collect(),
                    ..Failure::new(at, self.unbound_message())
                }),
            },
            _ => parsed,
        }
    }

    fn parse_all(&mut self) -> Parsed<&'a Term<'a>> {
        self.advance()?;
        self.push_frame(Kind::Top);
        loop {
            let after_operand = self.frame()?.after_operand;
            let tok = self.token.tok;
            if !after_operand || starts_argument(tok) {
                self.operand()?;
            } else if let Some((kind, precedence, assoc)) = binary_operator(tok) {
                self.binary(kind, precedence, assoc)?;
            } else {
                let expression = self.finish_expression()?;
                if let Some(done) = self.complete(expression)? {
                    return Ok(done);
                }
            }
        }
    }

    fn advance(&mut self) -> Parsed<()> {
        self.token = self.lexer.next_token()?;
        Ok(())
    }

    /// Consume a token of the given kind or fail with "expected …".
    fn expect(&mut self, tok: Tok<'_>, what: &str) -> Parsed<()> {
        if self.token.tok == tok {
            self.advance()
        } else {
            Err(expected(what, &self.token))
        }
    }

    fn frame(&mut self) -> Parsed<&mut Construct<'s, 'a>> {
        let at = self.token.start;
        self.frames.last_mut().ok_or_else(|| bug(at))
    }

    fn push_frame(&mut self, kind: Kind<'s, 'a>) {
        self.frames.push(Construct {
            kind,
            operands: self.operands.len(),
            operators: self.operators.len(),
            after_operand: false,
        });
    }

    // ----- operands -------------------------------------------------------

    /// A node with the span `from`..`end`.
    fn node(&self, node: Node<'a>, from: Pos, end: usize) -> &'a Term<'a> {
        self.arena.term_at(node, span(from, end), None)
    }

    /// A leaf for the current token, which is then consumed and delivered.
    fn leaf(&mut self, node: Node<'a>, from: Pos) -> Parsed<()> {
        let end = self.token.end;
        let term = self.node(node, from, end);
        self.advance()?;
        self.deliver(term, from, end)
    }

    /// Read whatever starts at the current token in operand position: an atom,
    /// a prefix operator, or the start of a construct (which pushes a frame).
    fn operand(&mut self) -> Parsed<()> {
        let token = self.token;
        let here = token.pos();
        match token.tok {
            Tok::Name(name) => {
                self.advance()?;
                self.name(name, here, token.end)
            }
            Tok::Underscore => Err(Failure::new(
                token.start,
                "`_` binds nothing that can be referred to; it cannot be used as a value",
            )),
            Tok::Int(digits) => {
                let value = integer(digits, false)
                    .ok_or_else(|| Failure::new(token.start, "integer literal out of range"))?;
                self.leaf(Node::Int(value), here)
            }
            Tok::Str { .. } => {
                let value = self.arena.tag(self.lexer.string_value(&token));
                self.leaf(Node::Str(value), here)
            }
            Tok::Keyword(Keyword::True) => self.leaf(Node::Bool(true), here),
            Tok::Keyword(Keyword::False) => self.leaf(Node::Bool(false), here),
            Tok::Con(tag) => {
                self.advance()?;
                let base = self.fields.len();
                if self.token.tok != Tok::LParen {
                    return self.constructor(tag, here, base, token.end);
                }
                self.advance()?;
                if self.token.tok == Tok::RParen {
                    let end = self.token.end;
                    self.advance()?;
                    return self.constructor(tag, here, base, end);
                }
                self.push_frame(Kind::Field {
                    tag,
                    at: here,
                    base,
                });
                Ok(())
            }
            Tok::LParen => {
                self.advance()?;
                self.push_frame(Kind::Paren { open: here });
                Ok(())
            }
            Tok::Keyword(Keyword::Case) => {
                self.advance()?;
                self.push_frame(Kind::Scrutinee { keyword: here });
                Ok(())
            }
            Tok::Keyword(Keyword::If) => {
                self.advance()?;
                self.push_frame(Kind::IfCondition { keyword: here });
                Ok(())
            }
            Tok::Lambda => {
                self.advance()?;
                let params = self.parameters()?;
                if params == 0 {
                    return Err(expected("a parameter name", &self.token));
                }
                self.expect(Tok::Dot, "`.` after the parameters")?;
                self.push_frame(Kind::Lambda { params, from: here });
                Ok(())
            }
            Tok::Keyword(Keyword::Rec) => {
                self.advance()?;
                let name = self.binder_name("the function's name after `rec`")?;
                self.scope.push(name, token.start)?;
                let params = self.parameters()?;
                if params == 0 {
                    return Err(Failure::new(
                        token.start,
                        "`rec` needs at least one parameter after the function's name",
                    ));
                }
                self.expect(Tok::Dot, "`.` after the parameters")?;
                self.push_frame(Kind::Rec {
                    params,
                    name,
                    from: here,
                });
                Ok(())
            }
            Tok::Keyword(Keyword::Let) => {
                self.advance()?;
                let rec = self.token.tok == Tok::Keyword(Keyword::Rec);
                if rec {
                    self.advance()?;
                }
                let def = self.token.pos();
                let name = self.binder_name("a name after `let`")?;
                if rec {
                    self.scope.push(name, token.start)?;
                }
                let params = self.parameters()?;
                if rec && params == 0 {
                    return Err(Failure::new(
                        token.start,
                        "`let rec` needs at least one parameter after the function's name",
                    ));
                }
                self.expect(Tok::Equals, "`=`")?;
                self.push_frame(Kind::LetBound {
                    name,
                    params,
                    rec,
                    keyword: here,
                    def,
                });
                Ok(())
            }
            Tok::Minus if !self.frame()?.after_operand => {
                self.advance()?;
                match self.token.tok {
                    // A `-` written directly against an integer is part of the literal.
                    Tok::Int(digits) if self.token.start == token.end => {
                        let value = integer(digits, true).ok_or_else(|| {
                            Failure::new(token.start, "integer literal out of range")
                        })?;
                        self.leaf(Node::Int(value), here)
                    }
                    _ => {
                        self.push_prefix(OpKind::Negate, here);
                        Ok(())
                    }
                }
            }
            Tok::Keyword(Keyword::Not) if !self.frame()?.after_operand => {
                self.advance()?;
                self.push_prefix(OpKind::Not, here);
                Ok(())
            }
            _ => Err(match token.tok {
                Tok::Eof => expected("an expression", &token),
                _ => unexpected(&token, "an expression"),
            }),
        }
    }

    /// A binder: a name or `_` (which binds a slot no name refers to).
    fn binder_name(&mut self, what: &str) -> Parsed<Option<&'s str>> {
        let name = match self.token.tok {
            Tok::Name(name) => Some(name),
            Tok::Underscore => None,
            _ => return Err(expected(what, &self.token)),
        };
        self.advance()?;
        Ok(name)
    }

    /// Read parameter names (each a name or `_`), bringing each into scope in
    /// turn; returns how many.
    fn parameters(&mut self) -> Parsed<u32> {
        let mut count: u32 = 0;
        loop {
            let name = match self.token.tok {
                Tok::Name(name) => Some(name),
                Tok::Underscore => None,
                _ => return Ok(count),
            };
            self.scope.push(name, self.token.start)?;
            count = count
                .checked_add(1)
                .ok_or_else(|| Failure::new(self.token.start, "too many parameters"))?;
            self.advance()?;
        }
    }

    /// The message for the unbound names found: `unbound name `x`` for one;
    /// for more, each with its line and column, the first
    /// [`UNBOUND_SHOWN`] of them.
    fn unbound_message(&self) -> String {
        match self.unbound.as_slice() {
            [(name, _)] => format!("unbound name `{name}`"),
            all => {
                let shown: Vec<String> = all
                    .iter()
                    .take(UNBOUND_SHOWN)
                    .map(|&(name, at)| format!("`{name}` ({})", place(self.text, at)))
                    .collect();
                let more = all.len().saturating_sub(UNBOUND_SHOWN);
                let tail = if more > 0 {
                    format!(" and {more} more")
                } else {
                    String::new()
                };
                format!("{} unbound names: {}{tail}", all.len(), shown.join(", "))
            }
        }
    }

    fn push_prefix(&mut self, kind: OpKind, at: Pos) {
        self.operators.push(Operator {
            kind,
            precedence: UNARY,
            at,
        });
    }

    /// Resolve a name read from `at` to byte `end`: the innermost local
    /// binder, else a named function.
    fn name(&mut self, name: &'s str, at: Pos, end: usize) -> Parsed<()> {
        if let Some(index) = self.scope.lookup(name) {
            return self.deliver(self.node(Node::Var(index), at, end), at, end);
        }
        let Some(function) = self.functions.lookup(name) else {
            // Noted, and parsed on as an integer, so that every unbound
            // name is found in one parse.
            if self.unbound_seen.insert(name) {
                self.unbound.push((name, at.byte));
            }
            return self.deliver(self.node(Node::Int(0), at, end), at, end);
        };
        if function.arity == 0 {
            let call = self.node(Node::Prim(function.prim, &[]), at, end);
            return self.deliver(call, at, end);
        }
        if self.frame()?.after_operand {
            // Passed as an argument: η-expand it into a lambda now.
            let term = self.eta(function, &[], at, end);
            return self.deliver(term, at, end);
        }
        self.operands.push(Pending::Partial {
            function,
            args: SmallVec::new(),
            from: at,
            name_end: end,
        });
        self.frame()?.after_operand = true;
        Ok(())
    }

    /// `(λ…λ. op(#n−1, …, #0)) a1 … ak` for a function of arity n given k < n
    /// arguments, each with the end of its source. The lambdas and the call
    /// in them are the name's (`from` to `name_end`); each application spans
    /// from the name to the end of its argument.
    fn eta(
        &self,
        function: Function,
        args: &[(&'a Term<'a>, usize)],
        from: Pos,
        name_end: usize,
    ) -> &'a Term<'a> {
        let arena = self.arena;
        let n = u32::try_from(function.arity).unwrap_or(u32::MAX);
        let vars: SmallVec<[&'a Term<'a>; 4]> = (0..n)
            .rev()
            .map(|i| self.node(Node::Var(i), from, name_end))
            .collect();
        let mut term = self.node(
            Node::Prim(function.prim, arena.terms(&vars)),
            from,
            name_end,
        );
        for _ in 0..n {
            term = self.node(Node::Lam(term), from, name_end);
        }
        for &(arg, end) in args {
            term = self.node(Node::App(term, arg), from, end);
        }
        term
    }

    /// Check (or record) a tag's arity and return the arena's copy of the tag.
    fn tag(&mut self, tag: &'s str, arity: u32, at: usize) -> Parsed<&'a str> {
        match self.tags.entry(tag) {
            Entry::Occupied(entry) => {
                let first = *entry.get();
                if first.arity == arity {
                    Ok(first.tag)
                } else {
                    Err(Failure::new(
                        at,
                        format!(
                            "constructor `{tag}` has {} field(s) at {} but {arity} here; a constructor keeps one arity",
                            first.arity,
                            place(self.text, first.at)
                        ),
                    ))
                }
            }
            Entry::Vacant(entry) => {
                let copy = self.arena.tag(tag);
                entry.insert(TagUse {
                    tag: copy,
                    arity,
                    at,
                });
                Ok(copy)
            }
        }
    }

    /// Deliver the constructor `tag`, written from `at` to byte `end`, with
    /// the fields above `base` on the field stack.
    fn constructor(&mut self, tag: &'s str, at: Pos, base: usize, end: usize) -> Parsed<()> {
        let fields = self.fields.get(base..).unwrap_or(&[]);
        let arity = u32::try_from(fields.len())
            .map_err(|_| Failure::new(at.byte, "too many constructor fields"))?;
        let fields = self.arena.terms(fields);
        self.fields.truncate(base);
        let tag = self.tag(tag, arity, at.byte)?;
        self.deliver(self.node(Node::Con(tag, fields), at, end), at, end)
    }

    /// Hand a finished operand, read from `from` to byte `end`, to the
    /// innermost frame: it starts an application, or it is the next argument
    /// of the one in progress (which then spans from its head to `end`).
    fn deliver(&mut self, term: &'a Term<'a>, from: Pos, end: usize) -> Parsed<()> {
        let at = self.token.start;
        let frame = self.frames.last_mut().ok_or_else(|| bug(at))?;
        if !frame.after_operand {
            frame.after_operand = true;
            self.operands.push(Pending::Term { term, from, end });
            return Ok(());
        }
        let arena = self.arena;
        match self.operands.last_mut() {
            Some(Pending::Term {
                term: head,
                from: head_from,
                end: head_end,
            }) => {
                *head = arena.term_at(Node::App(head, term), span(*head_from, end), None);
                *head_end = end;
            }
            Some(Pending::Partial {
                function,
                args,
                from: head_from,
                ..
            }) => {
                args.push((term, end));
                if args.len() >= function.arity {
                    let head_from = *head_from;
                    let terms: SmallVec<[&'a Term<'a>; 4]> = args.iter().map(|a| a.0).collect();
                    let call = Node::Prim(function.prim, arena.terms(&terms));
                    let saturated = arena.term_at(call, span(head_from, end), None);
                    if let Some(top) = self.operands.last_mut() {
                        *top = Pending::Term {
                            term: saturated,
                            from: head_from,
                            end,
                        };
                    }
                }
            }
            None => return Err(bug(at)),
        }
        Ok(())
    }

    /// Turn an unsaturated function at the top of the operand stack into a term.
    fn materialize(&mut self) {
        if let Some(Pending::Partial {
            function,
            args,
            from,
            name_end,
        }) = self.operands.last()
        {
            let from = *from;
            let end = args.last().map_or(*name_end, |a| a.1);
            let term = self.eta(*function, args, from, *name_end);
            if let Some(top) = self.operands.last_mut() {
                *top = Pending::Term { term, from, end };
            }
        }
    }

    fn pop_term(&mut self, at: usize) -> Parsed<Extent<'a>> {
        match self.operands.pop() {
            Some(Pending::Term { term, from, end }) => Ok((term, from, end)),
            Some(Pending::Partial {
                function,
                args,
                from,
                name_end,
            }) => {
                let end = args.last().map_or(name_end, |a| a.1);
                Ok((self.eta(function, &args, from, name_end), from, end))
            }
            None => Err(bug(at)),
        }
    }

    // ----- operators ------------------------------------------------------

    fn binary(&mut self, kind: OpKind, precedence: u8, assoc: Assoc) -> Parsed<()> {
        let at = self.token.pos();
        self.materialize();
        let base = self.frame()?.operators;
        while let Some(top) = self.operators.last().copied() {
            if self.operators.len() <= base {
                break;
            }
            let reduce = match assoc {
                Assoc::Left => top.precedence >= precedence,
                Assoc::Right | Assoc::None => top.precedence > precedence,
            };
            if !reduce {
                if assoc == Assoc::None && top.precedence == precedence {
                    return Err(Failure::new(
                        at.byte,
                        format!(
                            "comparisons do not chain: add parentheses around the comparison before {}",
                            self.token.tok.describe()
                        ),
                    ));
                }
                break;
            }
            self.reduce()?;
        }
        self.operators.push(Operator {
            kind,
            precedence,
            at,
        });
        self.frame()?.after_operand = false;
        self.advance()
    }

    /// Apply the operator on top of the operator stack to its operands. The
    /// result spans from its first operand (or a prefix operator) to the end
    /// of its last; the `if` that `&&`, `||` and `not` stand for, and the
    /// booleans in it, all get that span.
    fn reduce(&mut self) -> Parsed<()> {
        let at = self.token.start;
        let operator = self.operators.pop().ok_or_else(|| bug(at))?;
        let here = operator.at.byte;
        let (term, from, end) = match operator.kind {
            OpKind::Negate => {
                let (x, _, end) = self.pop_term(here)?;
                let from = operator.at;
                let args = self.arena.terms(&[x]);
                (self.node(Node::Prim(Prim::Neg, args), from, end), from, end)
            }
            OpKind::Not => {
                let (x, _, end) = self.pop_term(here)?;
                let from = operator.at;
                let no = self.node(Node::Bool(false), from, end);
                let yes = self.node(Node::Bool(true), from, end);
                (self.node(Node::If(x, no, yes), from, end), from, end)
            }
            OpKind::Or | OpKind::And | OpKind::Binary(_) => {
                let (right, _, end) = self.pop_term(here)?;
                let (left, from, _) = self.pop_term(here)?;
                let node = match operator.kind {
                    OpKind::Or => Node::If(left, self.node(Node::Bool(true), from, end), right),
                    OpKind::And => Node::If(left, right, self.node(Node::Bool(false), from, end)),
                    OpKind::Binary(prim) => Node::Prim(prim, self.arena.terms(&[left, right])),
                    OpKind::Negate | OpKind::Not => return Err(bug(here)),
                };
                (self.node(node, from, end), from, end)
            }
        };
        self.operands.push(Pending::Term { term, from, end });
        Ok(())
    }

    /// The current token cannot continue the innermost frame's expression:
    /// reduce what is pending into one term, with its extent.
    fn finish_expression(&mut self) -> Parsed<Extent<'a>> {
        let frame = *self.frame()?;
        if !frame.after_operand {
            return Err(match self.token.tok {
                Tok::Eof => expected("an expression", &self.token),
                _ => unexpected(&self.token, "an expression"),
            });
        }
        self.materialize();
        while self.operators.len() > frame.operators {
            self.reduce()?;
        }
        let expression = self.pop_term(self.token.start)?;
        if self.operands.len() != frame.operands {
            return Err(bug(self.token.start));
        }
        Ok(expression)
    }

    // ----- constructs -----------------------------------------------------

    /// `count` lambdas around `term`, each with span `at` and `name`.
    fn wrap_lambdas(
        &self,
        mut term: &'a Term<'a>,
        count: u32,
        at: Span,
        name: Option<&'a str>,
    ) -> &'a Term<'a> {
        for _ in 0..count {
            term = self.arena.term_at(Node::Lam(term), at, name);
        }
        term
    }

    /// The recursive function `μλ. λ…λ. body` of `params` parameters, each
    /// of its lambdas with span `at` and `name`.
    fn rec_function(
        &self,
        body: &'a Term<'a>,
        params: u32,
        at: Span,
        name: Option<&'a str>,
    ) -> &'a Term<'a> {
        let inner = self.wrap_lambdas(body, params.saturating_sub(1), at, name);
        self.arena.term_at(Node::RecLam(inner), at, name)
    }

    /// The innermost frame's expression is `expression`, ended by the current
    /// token: finish the construct the frame stands for. Returns the
    /// program's term when the top frame completes.
    fn complete(&mut self, expression: Extent<'a>) -> Parsed<Option<&'a Term<'a>>> {
        let (term, _, end) = expression;
        let at = self.token.start;
        let frame = self.frames.pop().ok_or_else(|| bug(at))?;
        let arena = self.arena;
        match frame.kind {
            Kind::Top => {
                if self.token.tok == Tok::Eof {
                    return Ok(Some(term));
                }
                return Err(Failure::new(
                    at,
                    format!("unexpected {}", self.token.tok.describe()),
                ));
            }
            Kind::Paren { open } => {
                if self.token.tok != Tok::RParen {
                    let what = format!("`)` to close the `(` at {}", place(self.text, open.byte));
                    return Err(expected(&what, &self.token));
                }
                let close = self.token.end;
                self.advance()?;
                self.deliver(term, open, close)?;
            }
            Kind::Lambda { params, from } => {
                self.scope.pop(params);
                let function = self.wrap_lambdas(term, params, span(from, end), None);
                self.deliver(function, from, end)?;
            }
            Kind::Rec { params, name, from } => {
                self.scope.pop(params.saturating_add(1));
                let name = name.map(|n| arena.tag(n));
                let function = self.rec_function(term, params, span(from, end), name);
                self.deliver(function, from, end)?;
            }
            Kind::LetBound {
                name,
                params,
                rec,
                keyword,
                def,
            } => {
                if self.token.tok != Tok::Keyword(Keyword::In) {
                    let what = format!(
                        "`in` to go with the `let` at {}",
                        place(self.text, keyword.byte)
                    );
                    return Err(expected(&what, &self.token));
                }
                let label = name.map(|n| arena.tag(n));
                let bound = if rec {
                    self.scope.pop(params.saturating_add(1));
                    self.rec_function(term, params, span(def, end), label)
                } else if params > 0 {
                    self.scope.pop(params);
                    self.wrap_lambdas(term, params, span(def, end), label)
                } else {
                    // `let f = \x. e` names the function too, unless it has
                    // a name of its own (`let f = rec g x. e`).
                    match (label, term.node()) {
                        (Some(label), Node::Lam(_) | Node::RecLam(_)) if term.name().is_none() => {
                            arena.named_as(label, term)
                        }
                        _ => term,
                    }
                };
                self.scope.push(name, at)?;
                self.advance()?;
                self.push_frame(Kind::LetBody { bound, keyword });
            }
            Kind::LetBody { bound, keyword } => {
                self.scope.pop(1);
                let whole = self.node(Node::Let(bound, term), keyword, end);
                self.deliver(whole, keyword, end)?;
            }
            Kind::IfCondition { keyword } => {
                if self.token.tok != Tok::Keyword(Keyword::Then) {
                    let what = format!(
                        "`then` to go with the `if` at {}",
                        place(self.text, keyword.byte)
                    );
                    return Err(expected(&what, &self.token));
                }
                self.advance()?;
                self.push_frame(Kind::IfThen {
                    condition: term,
                    keyword,
                });
            }
            Kind::IfThen { condition, keyword } => {
                if self.token.tok != Tok::Keyword(Keyword::Else) {
                    let what = format!(
                        "`else` to go with the `if` at {}",
                        place(self.text, keyword.byte)
                    );
                    return Err(expected(&what, &self.token));
                }
                self.advance()?;
                self.push_frame(Kind::IfElse {
                    condition,
                    then: term,
                    keyword,
                });
            }
            Kind::IfElse {
                condition,
                then,
                keyword,
            } => {
                let whole = self.node(Node::If(condition, then, term), keyword, end);
                self.deliver(whole, keyword, end)?;
            }
            Kind::Scrutinee { keyword } => {
                if self.token.tok != Tok::Keyword(Keyword::Of) {
                    let what = format!(
                        "`of` to go with the `case` at {}",
                        place(self.text, keyword.byte)
                    );
                    return Err(expected(&what, &self.token));
                }
                self.advance()?;
                self.expect(Tok::LBrace, "`{` to open the case arms")?;
                let id = self.next_case;
                self.next_case = self.next_case.wrapping_add(1);
                self.cases.push(OpenCase {
                    scrutinee: term,
                    arms: self.arms.len(),
                    default: None,
                    id,
                    keyword,
                });
                self.next_arm()?;
            }
            Kind::ArmBody { pattern } => {
                let case = self.cases.last_mut().ok_or_else(|| bug(at))?;
                match pattern {
                    Some((tag, arity)) => {
                        self.scope.pop(arity);
                        self.arms.push(Arm::new(tag, arity, term));
                    }
                    None => case.default = Some(term),
                }
                match self.token.tok {
                    Tok::Semicolon => {
                        self.advance()?;
                        self.next_arm()?;
                    }
                    Tok::RBrace => {
                        let close = self.token.end;
                        self.advance()?;
                        self.finish_case(close)?;
                    }
                    _ => return Err(expected("`;` or `}` after the case arm", &self.token)),
                }
            }
            Kind::Field { tag, at, base } => {
                self.fields.push(term);
                match self.token.tok {
                    Tok::Comma => {
                        self.advance()?;
                        self.push_frame(Kind::Field { tag, at, base });
                    }
                    Tok::RParen => {
                        let close = self.token.end;
                        self.advance()?;
                        self.constructor(tag, at, base, close)?;
                    }
                    _ => {
                        let what = format!("`,` or `)` in the fields of `{tag}`");
                        return Err(expected(&what, &self.token));
                    }
                }
            }
        }
        Ok(None)
    }

    /// At the start of an arm of the innermost open case, or at its `}`.
    fn next_arm(&mut self) -> Parsed<()> {
        let token = self.token;
        let case = *self.cases.last().ok_or_else(|| bug(token.start))?;
        match token.tok {
            Tok::RBrace => {
                let close = token.end;
                self.advance()?;
                self.finish_case(close)
            }
            Tok::Underscore | Tok::Con(_) if case.default.is_some() => Err(Failure::new(
                token.start,
                "the `_` arm must be the last arm of a case",
            )),
            Tok::Underscore => {
                self.advance()?;
                self.expect(Tok::Arrow, "`=>` after the pattern")?;
                self.push_frame(Kind::ArmBody { pattern: None });
                Ok(())
            }
            Tok::Con(name) => {
                self.advance()?;
                let mut arity: u32 = 0;
                if self.token.tok == Tok::LParen {
                    self.advance()?;
                    if self.token.tok == Tok::RParen {
                        self.advance()?;
                    } else {
                        loop {
                            let binder = self.binder_name("a field name or `_`")?;
                            self.scope.push(binder, token.start)?;
                            arity = arity.checked_add(1).ok_or_else(|| {
                                Failure::new(token.start, "too many constructor fields")
                            })?;
                            match self.token.tok {
                                Tok::Comma => self.advance()?,
                                Tok::RParen => {
                                    self.advance()?;
                                    break;
                                }
                                _ => {
                                    return Err(expected("`,` or `)` in the pattern", &self.token))
                                }
                            }
                        }
                    }
                }
                self.expect(Tok::Arrow, "`=>` after the pattern")?;
                let tag = self.tag(name, arity, token.start)?;
                if !self.arm_tags.insert((case.id, tag)) {
                    return Err(Failure::new(
                        token.start,
                        format!("this case already has an arm for `{name}`"),
                    ));
                }
                self.push_frame(Kind::ArmBody {
                    pattern: Some((tag, arity)),
                });
                Ok(())
            }
            _ => Err(expected(
                "a case arm (`Constructor => …` or `_ => …`) or `}`",
                &token,
            )),
        }
    }

    /// The `}` of the innermost open case, ending at byte `close`, has been
    /// read: build the case, spanning from `case` to the `}`.
    fn finish_case(&mut self, close: usize) -> Parsed<()> {
        let at = self.token.start;
        let case = self.cases.pop().ok_or_else(|| bug(at))?;
        let arms = self.arena.arms(self.arms.get(case.arms..).unwrap_or(&[]));
        self.arms.truncate(case.arms);
        for arm in arms {
            self.arm_tags.remove(&(case.id, arm.tag));
        }
        let node = Node::Case(case.scrutinee, arms, case.default);
        let term = self.node(node, case.keyword, close);
        self.deliver(term, case.keyword, close)
    }
}
