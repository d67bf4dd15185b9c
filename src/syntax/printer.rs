//! The printer of the text syntax: minimal parenthesisation by comparing each
//! subterm's precedence with what its position demands (Ramsey, "Unparsing
//! expressions with prefix and postfix operators", *Software—Practice and
//! Experience* 28(12), 1998), with binders named from their de Bruijn level so
//! names never capture. An explicit task stack replaces recursion.

use std::fmt::Write as _;

use super::lexer::is_keyword;
use super::Functions;
use crate::prim::Prim;
use crate::term::{Arm, Node, Term};

/// Open-ended forms: `\`, `rec`, `let`, `if`.
const OPEN: u8 = 0;
/// The binding power of unary `-`.
const UNARY: u8 = 7;
/// Application, and named functions applied to their arguments.
const APP: u8 = 8;
/// A negative literal: fine at the head of an application, not as an argument
/// (`f -7` would be a subtraction).
const NEGATIVE: u8 = 9;
/// Atoms: names, literals, constructors, `case`, parenthesised terms.
const ATOM: u8 = 10;

/// What a position demands of the term printed in it.
#[derive(Clone, Copy, Debug)]
struct Ctx {
    /// The least precedence printed without parentheses.
    min: u8,
    /// An argument is printed right after this position, so a nullary
    /// constructor here needs parentheses (`Foo (x)` would give `Foo` a field).
    before_argument: bool,
}

/// A delimited position: the whole term, inside parentheses, a let-bound term
/// or body, a branch, an arm body, a field, a lambda body.
const DELIMITED: Ctx = Ctx {
    min: OPEN,
    before_argument: false,
};
const HEAD: Ctx = Ctx {
    min: APP,
    before_argument: true,
};
const LAST_ARGUMENT: Ctx = Ctx {
    min: ATOM,
    before_argument: false,
};
const MORE_ARGUMENTS: Ctx = Ctx {
    min: ATOM,
    before_argument: true,
};

const fn at_least(min: u8) -> Ctx {
    Ctx {
        min,
        before_argument: false,
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Assoc {
    Left,
    Right,
    None,
}

/// The infix operators: symbol with its spaces, precedence, associativity
/// (the parser's table, loosest first).
fn infix(prim: Prim) -> Option<(&'static str, u8, Assoc)> {
    Some(match prim {
        Prim::Eq => (" == ", 3, Assoc::None),
        Prim::Ne => (" != ", 3, Assoc::None),
        Prim::Lt => (" < ", 3, Assoc::None),
        Prim::Le => (" <= ", 3, Assoc::None),
        Prim::Gt => (" > ", 3, Assoc::None),
        Prim::Ge => (" >= ", 3, Assoc::None),
        Prim::Concat => (" ++ ", 4, Assoc::Right),
        Prim::Add => (" + ", 5, Assoc::Left),
        Prim::Sub => (" - ", 5, Assoc::Left),
        Prim::Mul => (" * ", 6, Assoc::Left),
        Prim::Div => (" / ", 6, Assoc::Left),
        Prim::Rem => (" % ", 6, Assoc::Left),
        _ => return None,
    })
}

/// Whether a term printed in a unary operand position starts with a digit:
/// it is a non-negative literal at the head of a (possibly empty) spine of
/// applications, the only unparenthesised forms there that begin with one.
fn starts_with_digit(term: &Term<'_>) -> bool {
    let mut term = term;
    loop {
        match *term.node() {
            Node::App(function, _) => term = function,
            Node::Int(n) => return n >= 0,
            _ => return false,
        }
    }
}

fn is_negation(term: &Term<'_>) -> bool {
    matches!(term.node(), Node::Prim(Prim::Neg, [_]))
}

/// A piece of work: print a term, or some text, or continue a list.
#[derive(Clone, Copy, Debug)]
enum Task<'t> {
    /// Print a term whose binders start at `depth`.
    Term(&'t Term<'t>, u32, Ctx),
    Text(&'static str),
    /// Print `items[next..]` separated by `, `.
    List {
        items: &'t [&'t Term<'t>],
        next: usize,
        depth: u32,
    },
    /// Print `arms[next..]`, then the default arm, then the closing brace.
    Arms {
        arms: &'t [Arm<'t>],
        next: usize,
        default: Option<&'t Term<'t>>,
        depth: u32,
    },
}

/// An iterative printer writing at most a little past `max` bytes.
pub(super) struct Printer<'f> {
    functions: &'f Functions<'f>,
    max: usize,
    out: String,
}

impl<'f> Printer<'f> {
    pub(super) fn new(functions: &'f Functions<'f>, max: usize) -> Self {
        Printer {
            functions,
            max,
            out: String::new(),
        }
    }

    fn full(&self) -> bool {
        self.out.len() > self.max
    }

    /// Print `term`; the text is longer than `max` exactly when it was cut short.
    pub(super) fn run(mut self, term: &Term<'_>) -> String {
        let mut tasks: Vec<Task<'_>> = vec![Task::Term(term, 0, DELIMITED)];
        while let Some(task) = tasks.pop() {
            if self.full() {
                break;
            }
            match task {
                Task::Text(text) => self.out.push_str(text),
                Task::Term(t, depth, ctx) => self.term(t, depth, ctx, &mut tasks),
                Task::List { items, next, depth } => {
                    if let Some(&item) = items.get(next) {
                        if next > 0 {
                            self.out.push_str(", ");
                        }
                        tasks.push(Task::List {
                            items,
                            next: next + 1,
                            depth,
                        });
                        tasks.push(Task::Term(item, depth, DELIMITED));
                    }
                }
                Task::Arms {
                    arms,
                    next,
                    default,
                    depth,
                } => self.arm(arms, next, default, depth, &mut tasks),
            }
        }
        self.out
    }

    /// The name of the binder at de Bruijn level `level`: `a`…`z`, then `a1`…,
    /// primed in the unlikely case that it is a keyword or a function name.
    fn name(&mut self, level: u32) {
        let start = self.out.len();
        self.out.push(char::from(b'a' + (level % 26) as u8));
        if level >= 26 {
            let _ = write!(self.out, "{}", level / 26);
        }
        loop {
            let name = self.out.get(start..).unwrap_or("");
            if !is_keyword(name) && self.functions.lookup(name).is_none() {
                break;
            }
            self.out.push('\'');
        }
    }

    fn precedence(&self, term: &Term<'_>) -> u8 {
        match *term.node() {
            Node::Var(_) | Node::Bool(_) | Node::Str(_) | Node::Con(..) | Node::Case(..) => ATOM,
            Node::Int(n) if n < 0 => NEGATIVE,
            Node::Int(_) => ATOM,
            Node::App(..) => APP,
            Node::Lam(_) | Node::RecLam(_) | Node::Let(..) | Node::If(..) => OPEN,
            Node::Prim(op, args) => match self.functions.by_prim(op) {
                Some(f) if f.arity == args.len() => {
                    if args.is_empty() {
                        ATOM
                    } else {
                        APP
                    }
                }
                _ => match (infix(op), args.len()) {
                    (Some((_, p, _)), 2) => p,
                    (None, 1) if op == Prim::Neg => UNARY,
                    _ => ATOM,
                },
            },
        }
    }

    fn term<'t>(&mut self, term: &'t Term<'t>, depth: u32, ctx: Ctx, tasks: &mut Vec<Task<'t>>) {
        let nullary = matches!(term.node(), Node::Con(_, fields) if fields.is_empty());
        let mut ctx = ctx;
        if self.precedence(term) < ctx.min || (ctx.before_argument && nullary) {
            self.out.push('(');
            tasks.push(Task::Text(")"));
            ctx = DELIMITED;
        }
        match *term.node() {
            Node::Var(index) => match depth.checked_sub(index).and_then(|d| d.checked_sub(1)) {
                Some(level) => self.name(level),
                None => {
                    let _ = write!(self.out, "#{}", index - depth);
                }
            },
            Node::Int(n) => {
                let _ = write!(self.out, "{n}");
            }
            Node::Bool(b) => self.out.push_str(if b { "true" } else { "false" }),
            Node::Str(s) => self.string(s),
            Node::Lam(body) => {
                self.out.push('\\');
                let body = self.binders(body, depth);
                tasks.push(Task::Term(body.0, body.1, DELIMITED));
            }
            Node::RecLam(body) => {
                self.out.push_str("rec ");
                self.name(depth);
                self.out.push(' ');
                let body = self.binders(body, depth.saturating_add(1));
                tasks.push(Task::Term(body.0, body.1, DELIMITED));
            }
            Node::App(function, argument) => {
                let last = if ctx.before_argument {
                    MORE_ARGUMENTS
                } else {
                    LAST_ARGUMENT
                };
                tasks.push(Task::Term(argument, depth, last));
                tasks.push(Task::Text(" "));
                tasks.push(Task::Term(function, depth, HEAD));
            }
            Node::Let(bound, body) => {
                let inner = depth.saturating_add(1);
                tasks.push(Task::Term(body, inner, DELIMITED));
                tasks.push(Task::Text(" in "));
                if let Node::RecLam(function) = *bound.node() {
                    // let rec f x y = e1 in e2: f is bound by both the μλ and the let.
                    self.out.push_str("let rec ");
                    self.name(depth);
                    self.out.push(' ');
                    let (e1, level) = self.parameters(function, inner);
                    self.out.push_str(" = ");
                    tasks.push(Task::Term(e1, level, DELIMITED));
                } else {
                    self.out.push_str("let ");
                    self.name(depth);
                    self.out.push_str(" = ");
                    tasks.push(Task::Term(bound, depth, DELIMITED));
                }
            }
            Node::If(condition, then, otherwise) => {
                self.out.push_str("if ");
                tasks.push(Task::Term(otherwise, depth, DELIMITED));
                tasks.push(Task::Text(" else "));
                tasks.push(Task::Term(then, depth, DELIMITED));
                tasks.push(Task::Text(" then "));
                tasks.push(Task::Term(condition, depth, DELIMITED));
            }
            Node::Prim(op, args) => self.prim(op, args, depth, ctx, tasks),
            Node::Con(tag, fields) => {
                self.out.push_str(tag);
                if !fields.is_empty() {
                    self.out.push('(');
                    tasks.push(Task::Text(")"));
                    tasks.push(Task::List {
                        items: fields,
                        next: 0,
                        depth,
                    });
                }
            }
            Node::Case(scrutinee, arms, default) => {
                self.out.push_str("case ");
                tasks.push(Task::Arms {
                    arms,
                    next: 0,
                    default,
                    depth,
                });
                tasks.push(Task::Text(" of {"));
                tasks.push(Task::Term(scrutinee, depth, DELIMITED));
            }
        }
    }

    /// Write the names of a λ's binder and of the λs directly under it, then
    /// `. `; returns the innermost body and its depth.
    fn binders<'t>(&mut self, body: &'t Term<'t>, level: u32) -> (&'t Term<'t>, u32) {
        let (body, depth) = self.parameters(body, level);
        self.out.push_str(". ");
        (body, depth)
    }

    /// Write `name(level)` and, for each λ directly under `body`, one more name;
    /// returns the innermost body and its depth. Stops early once full.
    fn parameters<'t>(&mut self, body: &'t Term<'t>, level: u32) -> (&'t Term<'t>, u32) {
        self.name(level);
        let mut body = body;
        let mut depth = level.saturating_add(1);
        while let Node::Lam(inner) = *body.node() {
            if self.full() {
                break;
            }
            self.out.push(' ');
            self.name(depth);
            body = inner;
            depth = depth.saturating_add(1);
        }
        (body, depth)
    }

    fn prim<'t>(
        &mut self,
        op: Prim,
        args: &'t [&'t Term<'t>],
        depth: u32,
        ctx: Ctx,
        tasks: &mut Vec<Task<'t>>,
    ) {
        if let Some(function) = self.functions.by_prim(op).filter(|f| f.arity == args.len()) {
            // A named function applied to all its arguments: `length s`.
            self.out.push_str(function.name);
            for (i, &arg) in args.iter().enumerate().rev() {
                let last = i + 1 == args.len() && !ctx.before_argument;
                tasks.push(Task::Term(
                    arg,
                    depth,
                    if last { LAST_ARGUMENT } else { MORE_ARGUMENTS },
                ));
                tasks.push(Task::Text(" "));
            }
            return;
        }
        match (infix(op), args) {
            (Some((symbol, p, assoc)), &[left, right]) => {
                let (l, r) = match assoc {
                    Assoc::Left => (p, p + 1),
                    Assoc::Right => (p + 1, p),
                    Assoc::None => (p + 1, p + 1),
                };
                tasks.push(Task::Term(right, depth, at_least(r)));
                tasks.push(Task::Text(symbol));
                tasks.push(Task::Term(left, depth, at_least(l)));
            }
            (None, &[operand]) if op == Prim::Neg => {
                self.out.push('-');
                match *operand.node() {
                    // `-7` would be the literal; negation of a literal is `-(7)`.
                    Node::Int(_) => {
                        self.out.push('(');
                        tasks.push(Task::Text(")"));
                        tasks.push(Task::Term(operand, depth, DELIMITED));
                    }
                    _ => {
                        // `-5 x` would read as the literal −5 applied to x, so a
                        // space keeps the minus apart from a leading digit; `- -x`
                        // reads better than `--x`.
                        if starts_with_digit(operand) || is_negation(operand) {
                            self.out.push(' ');
                        }
                        tasks.push(Task::Term(operand, depth, at_least(UNARY)));
                    }
                }
            }
            _ => {
                // A host call printed without its table, or an unvalidated
                // term: show it, though it will not parse.
                let _ = match op {
                    Prim::Host(id) => write!(self.out, "host_function#{}(", id.index()),
                    _ => write!(self.out, "#{}(", op.name()),
                };
                tasks.push(Task::Text(")"));
                tasks.push(Task::List {
                    items: args,
                    next: 0,
                    depth,
                });
            }
        }
    }

    /// Print arm `next` of a case (or, past the last arm, the default arm and
    /// the closing brace).
    fn arm<'t>(
        &mut self,
        arms: &'t [Arm<'t>],
        next: usize,
        default: Option<&'t Term<'t>>,
        depth: u32,
        tasks: &mut Vec<Task<'t>>,
    ) {
        let separator = if next == 0 { " " } else { "; " };
        if let Some(arm) = arms.get(next) {
            self.out.push_str(separator);
            self.out.push_str(arm.tag);
            if arm.arity > 0 {
                self.out.push('(');
                for i in 0..arm.arity {
                    if self.full() {
                        break;
                    }
                    if i > 0 {
                        self.out.push_str(", ");
                    }
                    self.name(depth.saturating_add(i));
                }
                self.out.push(')');
            }
            self.out.push_str(" => ");
            tasks.push(Task::Arms {
                arms,
                next: next + 1,
                default,
                depth,
            });
            tasks.push(Task::Term(
                arm.body,
                depth.saturating_add(arm.arity),
                DELIMITED,
            ));
        } else if let Some(body) = default {
            self.out.push_str(separator);
            self.out.push_str("_ => ");
            tasks.push(Task::Text(" }"));
            tasks.push(Task::Term(body, depth, DELIMITED));
        } else if next == 0 {
            self.out.push('}');
        } else {
            self.out.push_str(" }");
        }
    }

    /// A string literal, escaped.
    fn string(&mut self, s: &str) {
        self.out.push('"');
        for c in s.chars() {
            if self.full() {
                return;
            }
            match c {
                '"' => self.out.push_str("\\\""),
                '\\' => self.out.push_str("\\\\"),
                '\n' => self.out.push_str("\\n"),
                '\t' => self.out.push_str("\\t"),
                '\r' => self.out.push_str("\\r"),
                c if c.is_control() => {
                    let _ = write!(self.out, "\\u{{{:x}}}", u32::from(c));
                }
                c => self.out.push(c),
            }
        }
        self.out.push('"');
    }
}
