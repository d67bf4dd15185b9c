//! Where things are: source spans on terms, and where a run stopped — the
//! span of its redex and the backtrace of the calls pending around it.
//!
//! A backtrace is defined on the semantics, not on any machine. Contracting
//! `(λ. t) v` at call site `s` leaves a *call mark* `⟨f, s⟩` around the
//! contractum, naming the function `f` that was applied; a value leaves its
//! mark at no cost; and a mark directly inside another replaces it, so a
//! call in tail position takes its caller's place and loops run in constant
//! space. This is the continuation-mark discipline of Clements and
//! Felleisen, "A tail-recursive machine with stack inspection" (TOPLAS
//! 26(6), 2004). The backtrace of `E[r]` is the marks of `E`, innermost
//! first. Every machine reads it off its own state (the stepper's context,
//! the CEK machine's continuation, the env machine's callers), and
//! [`crate::disagreement`] compares them.

use std::sync::Arc;

/// A stretch of source: the embedder's file number, a byte range, and the
/// line and column of its start (both from 1; 0 when not known).
///
/// The text parser fills all five, with columns in display width (a CJK
/// character or an emoji counts two). A language lowered through the
/// builder API attaches its own with [`crate::Arena::at`], and gets them
/// back, unchanged, in a [`Location`].
///
/// # Examples
///
/// ```
/// use orrery::Span;
/// let span = Span::new(3, 10, 14);
/// assert_eq!((span.file, span.start, span.end, span.line), (3, 10, 14, 0));
/// let placed = span.with_position(2, 5);
/// assert_eq!((placed.line, placed.col), (2, 5));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub struct Span {
    /// Which source: a number of the embedder's (the text parser uses 0).
    pub file: u32,
    /// The first byte.
    pub start: u32,
    /// One past the last byte.
    pub end: u32,
    /// The line of `start`, from 1 (0: not known).
    pub line: u32,
    /// The display column of `start`, from 1 (0: not known).
    pub col: u32,
}

impl Span {
    /// Bytes `start..end` of file `file`, with no line or column.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Span::new(0, 4, 9).end, 9);
    /// ```
    pub fn new(file: u32, start: u32, end: u32) -> Span {
        Span {
            file,
            start,
            end,
            line: 0,
            col: 0,
        }
    }

    /// The same bytes, at `line` and display column `col`.
    ///
    /// # Examples
    ///
    /// ```
    /// let span = orrery::Span::new(0, 0, 1).with_position(1, 1);
    /// assert_eq!(span.line, 1);
    /// ```
    pub fn with_position(self, line: u32, col: u32) -> Span {
        Span { line, col, ..self }
    }
}

/// How many frames a [`Backtrace`] keeps at each end: the innermost
/// `BACKTRACE_ENDS` and the outermost `BACKTRACE_ENDS`. A deeper one
/// counts the frames between in [`Backtrace::omitted`], so building it
/// takes time in proportion to the depth but memory for these frames only.
///
/// # Examples
///
/// ```
/// assert_eq!(orrery::BACKTRACE_ENDS, 16);
/// ```
pub const BACKTRACE_ENDS: usize = 16;

/// A pending call: the name of the function applied (if it has one) and
/// the span of the application (if it has one).
///
/// # Examples
///
/// ```
/// use orrery::{CallFrame, Span};
/// let frame = CallFrame { name: Some("tariff".into()), site: Some(Span::new(0, 3, 12)) };
/// assert_eq!(frame.name.as_deref(), Some("tariff"));
/// ```
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct CallFrame {
    /// The function's name: set by the builder ([`crate::Arena::named`]) or,
    /// in text, the name a `let` or `let rec` binds it to.
    pub name: Option<Arc<str>>,
    /// Where it was called.
    pub site: Option<Span>,
}

/// The calls pending where a run stopped, innermost first.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Program};
/// let source = "let rec down n = if n == 0 then 1 / n else 1 + down (n - 1) in down 40";
/// let program = Program::parse(source).unwrap();
/// for kind in MachineKind::enabled() {
///     let report = kind.run(&program, &Limits::default());
///     let trace = &report.location.as_ref().unwrap().backtrace;
///     // 41 calls of `down` are pending; the middle ones are counted, not kept.
///     assert_eq!(trace.depth(), 41);
///     assert_eq!(trace.frames.len(), 2 * orrery::BACKTRACE_ENDS);
///     assert_eq!(trace.omitted, 41 - 32);
///     assert_eq!(trace.frames[0].name.as_deref(), Some("down"));
/// }
/// ```
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Backtrace {
    /// The innermost frames, then (when [`omitted`](Backtrace::omitted) is
    /// not 0) the outermost [`BACKTRACE_ENDS`].
    pub frames: Vec<CallFrame>,
    /// How many frames between the two ends were left out; they sit after
    /// the first [`BACKTRACE_ENDS`] frames.
    pub omitted: u64,
}

impl Backtrace {
    /// How many calls were pending, kept or not.
    ///
    /// # Examples
    ///
    /// ```
    /// assert_eq!(orrery::Backtrace::default().depth(), 0);
    /// ```
    pub fn depth(&self) -> u64 {
        self.frames.len() as u64 + self.omitted
    }
}

/// Where a run stopped without a value: the span of the redex it could not
/// contract (an error), or of the next one (out of fuel, a limit,
/// cancellation), and the calls pending around it.
///
/// For errors and the end of the fuel this is part of the agreement
/// promise: every machine reports the same one. Where the memory limit or a
/// cancellation stops a run depends on the machine (each holds different
/// memory, and polls at different points), so there it is each machine's
/// own best account.
///
/// # Examples
///
/// ```
/// use orrery::{Limits, MachineKind, Outcome, Program};
/// let program = Program::parse("let share = \\n. 100 / n in\nshare 0").unwrap();
/// for kind in MachineKind::enabled() {
///     let report = kind.run(&program, &Limits::default());
///     assert!(matches!(report.outcome, Outcome::Error(_)));
///     let location = report.location.unwrap();
///     let at = location.span.unwrap();
///     assert_eq!((at.line, at.col), (1, 17)); // `100 / n`
///     let frame = &location.backtrace.frames[0];
///     assert_eq!(frame.name.as_deref(), Some("share"));
///     assert_eq!(frame.site.unwrap().line, 2);
/// }
/// ```
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Location {
    /// The redex's span, if it has one.
    pub span: Option<Span>,
    /// The pending calls.
    pub backtrace: Backtrace,
}

/// A machine's account of where it stopped, in image nodes: the redex, and
/// the call marks around it as (call site, function applied), innermost
/// first, kept within [`BACKTRACE_ENDS`] at each end as they are pushed.
#[derive(Clone, Debug, Default)]
pub(crate) struct Trail {
    pub(crate) redex: u32,
    first: Vec<(u32, u32)>,
    /// The outermost so far, as a ring once full.
    last: std::collections::VecDeque<(u32, u32)>,
    pushed: u64,
}

impl Trail {
    /// A trail for a stop at image node `redex` (or [`crate::image::NONE`]).
    pub(crate) fn new(redex: u32) -> Trail {
        Trail {
            redex,
            ..Trail::default()
        }
    }

    /// The next mark outward: the call site (an image node, or
    /// [`crate::image::NONE`]) and the λ applied there (likewise).
    pub(crate) fn push(&mut self, site: u32, lam: u32) {
        self.pushed += 1;
        if self.first.len() < BACKTRACE_ENDS {
            self.first.push((site, lam));
            return;
        }
        if self.last.len() == BACKTRACE_ENDS {
            self.last.pop_front();
        }
        self.last.push_back((site, lam));
    }

    /// The marks kept, innermost first, and how many were left out.
    pub(crate) fn marks(&self) -> (impl Iterator<Item = (u32, u32)> + '_, u64) {
        let kept = (self.first.len() + self.last.len()) as u64;
        (
            self.first.iter().chain(self.last.iter()).copied(),
            self.pushed - kept,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_trail_keeps_both_ends_and_counts_the_middle() {
        let mut trail = Trail::new(7);
        for k in 0..100 {
            trail.push(k, 1000 + k);
        }
        let (marks, omitted) = trail.marks();
        let marks: Vec<(u32, u32)> = marks.collect();
        assert_eq!(omitted, 100 - 2 * BACKTRACE_ENDS as u64);
        assert_eq!(marks.len(), 2 * BACKTRACE_ENDS);
        assert_eq!(marks[0], (0, 1000));
        assert_eq!(marks[BACKTRACE_ENDS - 1].0, BACKTRACE_ENDS as u32 - 1);
        assert_eq!(marks[BACKTRACE_ENDS].0, 100 - BACKTRACE_ENDS as u32);
        assert_eq!(marks.last().copied(), Some((99, 1099)));
    }

    #[test]
    fn a_shallow_trail_keeps_everything() {
        let mut trail = Trail::new(0);
        trail.push(1, 2);
        trail.push(3, 4);
        let (marks, omitted) = trail.marks();
        assert_eq!(marks.collect::<Vec<_>>(), [(1, 2), (3, 4)]);
        assert_eq!(omitted, 0);
    }
}
