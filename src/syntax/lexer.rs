//! The lexer of the text syntax: a hand-written maximal-munch scanner over bytes
//! (Aho, Lam, Sethi and Ullman, *Compilers: Principles, Techniques, and Tools*,
//! 2nd ed., 2006, ch. 3), producing one token at a time with names borrowed from
//! the source. Names follow Unicode Standard Annex #31 (*Unicode Identifiers
//! and Syntax*, revision 39, 2023, §2, Default Identifiers: `XID_Start` then
//! `XID_Continue`), read from the tables of the `unicode-ident` crate; each
//! token's line and display column are kept as the scanner moves.

use super::{char_width, Failure};

/// The keywords of the syntax.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Keyword {
    Let,
    Rec,
    In,
    If,
    Then,
    Else,
    Case,
    Of,
    True,
    False,
    Not,
}

impl Keyword {
    fn from_word(word: &str) -> Option<Keyword> {
        Some(match word {
            "let" => Keyword::Let,
            "rec" => Keyword::Rec,
            "in" => Keyword::In,
            "if" => Keyword::If,
            "then" => Keyword::Then,
            "else" => Keyword::Else,
            "case" => Keyword::Case,
            "of" => Keyword::Of,
            "true" => Keyword::True,
            "false" => Keyword::False,
            "not" => Keyword::Not,
            _ => return None,
        })
    }

    pub(super) fn text(self) -> &'static str {
        match self {
            Keyword::Let => "let",
            Keyword::Rec => "rec",
            Keyword::In => "in",
            Keyword::If => "if",
            Keyword::Then => "then",
            Keyword::Else => "else",
            Keyword::Case => "case",
            Keyword::Of => "of",
            Keyword::True => "true",
            Keyword::False => "false",
            Keyword::Not => "not",
        }
    }
}

/// Whether a word is a keyword (the printer never generates one).
pub(super) fn is_keyword(word: &str) -> bool {
    Keyword::from_word(word).is_some()
}

/// A token's kind, with the source text it stands for where that matters.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Tok<'s> {
    /// A name (its first character not upper case) other than `_` and the
    /// keywords.
    Name(&'s str),
    /// `_` on its own: a binder that cannot be referred to, or the default arm.
    Underscore,
    /// A constructor name: a name whose first character is upper case.
    Con(&'s str),
    /// The digits of an integer literal (without sign).
    Int(&'s str),
    /// A string literal; when `escaped`, its value is in [`Lexer::string_value`]'s buffer.
    Str {
        escaped: bool,
    },
    Keyword(Keyword),
    /// `\` or `λ`.
    Lambda,
    Dot,
    LParen,
    RParen,
    LBrace,
    RBrace,
    Comma,
    Semicolon,
    /// `=`
    Equals,
    /// `=>`
    Arrow,
    OrOr,
    AndAnd,
    EqEq,
    NotEq,
    Lt,
    Le,
    Gt,
    Ge,
    PlusPlus,
    Plus,
    Minus,
    Star,
    Slash,
    Percent,
    Eof,
}

impl Tok<'_> {
    /// How a message names this token.
    pub(super) fn describe(&self) -> String {
        let fixed = match self {
            Tok::Name(name) => return format!("`{name}`"),
            Tok::Con(name) => return format!("`{name}`"),
            Tok::Int(digits) => return format!("`{digits}`"),
            Tok::Keyword(k) => return format!("`{}`", k.text()),
            Tok::Str { .. } => "a string literal",
            Tok::Eof => "end of input",
            Tok::Underscore => "`_`",
            Tok::Lambda => "`\\`",
            Tok::Dot => "`.`",
            Tok::LParen => "`(`",
            Tok::RParen => "`)`",
            Tok::LBrace => "`{`",
            Tok::RBrace => "`}`",
            Tok::Comma => "`,`",
            Tok::Semicolon => "`;`",
            Tok::Equals => "`=`",
            Tok::Arrow => "`=>`",
            Tok::OrOr => "`||`",
            Tok::AndAnd => "`&&`",
            Tok::EqEq => "`==`",
            Tok::NotEq => "`!=`",
            Tok::Lt => "`<`",
            Tok::Le => "`<=`",
            Tok::Gt => "`>`",
            Tok::Ge => "`>=`",
            Tok::PlusPlus => "`++`",
            Tok::Plus => "`+`",
            Tok::Minus => "`-`",
            Tok::Star => "`*`",
            Tok::Slash => "`/`",
            Tok::Percent => "`%`",
        };
        fixed.to_string()
    }
}

/// A place in the source: a byte offset and its 1-based line and display
/// column.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Pos {
    pub(super) byte: usize,
    pub(super) line: u32,
    pub(super) col: u32,
}

/// A token, the byte range of the source it covers, and where it starts.
#[derive(Clone, Copy, Debug)]
pub(super) struct Token<'s> {
    pub(super) tok: Tok<'s>,
    pub(super) start: usize,
    pub(super) end: usize,
    pub(super) line: u32,
    pub(super) col: u32,
}

impl Token<'_> {
    /// Where the token starts.
    pub(super) fn pos(&self) -> Pos {
        Pos {
            byte: self.start,
            line: self.line,
            col: self.col,
        }
    }
}

/// The scanner: a position in the source, the line and column of the
/// latest token's start, and a buffer for the value of the latest string
/// literal that had escapes.
pub(super) struct Lexer<'s> {
    text: &'s str,
    bytes: &'s [u8],
    pos: usize,
    /// Where the latest token started: the line and column are counted from
    /// here to the next token's start, so the whole source is read once.
    seen: Pos,
    buffer: String,
}

/// The byte-order mark, skipped at the very start of the text.
const BOM: &str = "\u{feff}";

/// Whether `c` may continue a name: UAX #31's `XID_Continue`, or `'` (so
/// `x'` is a name), but never `λ`, which is always the lambda.
fn continues_name(c: char) -> bool {
    if c.is_ascii() {
        c.is_ascii_alphanumeric() || c == '_' || c == '\''
    } else {
        c != 'λ' && unicode_ident::is_xid_continue(c)
    }
}

/// Whether `c` may start a name or a constructor: `_`, or UAX #31's
/// `XID_Start` other than `λ`.
fn starts_name(c: char) -> bool {
    if c.is_ascii() {
        c.is_ascii_alphabetic() || c == '_'
    } else {
        c != 'λ' && unicode_ident::is_xid_start(c)
    }
}

impl<'s> Lexer<'s> {
    pub(super) fn new(text: &'s str) -> Self {
        // Offsets count from the first byte of the text, the mark included;
        // the mark is as wide as nothing, so the first column is still 1.
        let pos = if text.starts_with(BOM) { BOM.len() } else { 0 };
        Lexer {
            text,
            bytes: text.as_bytes(),
            pos,
            seen: Pos {
                byte: pos,
                line: 1,
                col: 1,
            },
            buffer: String::new(),
        }
    }

    /// The line and column of byte `to` (at or after the latest token's
    /// start, at a character boundary), moving the count there.
    fn locate(&mut self, to: usize) -> Pos {
        let Pos {
            byte,
            mut line,
            mut col,
        } = self.seen;
        let stretch = self.bytes.get(byte..to).unwrap_or(&[]);
        if stretch.is_ascii() {
            for &b in stretch {
                if b == b'\n' {
                    line = line.saturating_add(1);
                    col = 1;
                } else {
                    col = col.saturating_add(1);
                }
            }
        } else {
            for c in self.text.get(byte..to).unwrap_or("").chars() {
                if c == '\n' {
                    line = line.saturating_add(1);
                    col = 1;
                } else {
                    col = col.saturating_add(char_width(c));
                }
            }
        }
        self.seen = Pos {
            byte: to,
            line,
            col,
        };
        self.seen
    }

    /// The value of a string literal token: a slice of the source when it had
    /// no escapes, else the decoded buffer. Valid for the most recent token.
    pub(super) fn string_value(&self, token: &Token<'s>) -> &str {
        match token.tok {
            Tok::Str { escaped: true } => &self.buffer,
            _ => self
                .text
                .get(token.start + 1..token.end.saturating_sub(1))
                .unwrap_or(""),
        }
    }

    fn peek(&self, at: usize) -> Option<u8> {
        self.bytes.get(at).copied()
    }

    /// The character at a byte offset, for messages.
    fn char_at(&self, at: usize) -> String {
        match self.text.get(at..).and_then(|rest| rest.chars().next()) {
            Some(c) if c.is_control() || c.is_whitespace() => format!("{:?}", c),
            Some(c) => format!("`{c}`"),
            None => "end of input".to_string(),
        }
    }

    fn skip_trivia(&mut self) {
        while let Some(b) = self.peek(self.pos) {
            match b {
                b' ' | b'\t' | b'\n' | b'\r' => self.pos += 1,
                b'#' => {
                    while let Some(c) = self.peek(self.pos) {
                        if c == b'\n' {
                            break;
                        }
                        self.pos += 1;
                    }
                }
                _ => break,
            }
        }
    }

    /// The character at byte `at`, if any.
    fn char_at_byte(&self, at: usize) -> Option<char> {
        self.text.get(at..).and_then(|rest| rest.chars().next())
    }

    /// The end of the name whose characters continue from byte `at`.
    fn name_end(&self, mut at: usize) -> usize {
        while let Some(&b) = self.bytes.get(at) {
            if b.is_ascii() {
                if !(b.is_ascii_alphanumeric() || b == b'_' || b == b'\'') {
                    break;
                }
                at += 1;
                continue;
            }
            match self.char_at_byte(at) {
                Some(c) if continues_name(c) => at += c.len_utf8(),
                _ => break,
            }
        }
        at
    }

    /// The next token.
    pub(super) fn next_token(&mut self) -> Result<Token<'s>, Failure> {
        self.skip_trivia();
        let start = self.pos;
        let Pos { line, col, .. } = self.locate(start);
        let Some(b) = self.peek(start) else {
            return Ok(Token {
                tok: Tok::Eof,
                start,
                end: start,
                line,
                col,
            });
        };
        let next = self.peek(start + 1);
        // A name or constructor starts with `_` or a letter (`XID_Start`);
        // a constructor's first character is upper case.
        let first = match b {
            b'a'..=b'z' | b'A'..=b'Z' | b'_' => Some(char::from(b)),
            0x80.. => self.char_at_byte(start).filter(|&c| starts_name(c)),
            _ => None,
        };
        if let Some(c) = first {
            let end = self.name_end(start + c.len_utf8());
            let word = self.text.get(start..end).unwrap_or("");
            let tok = if c.is_uppercase() {
                Tok::Con(word)
            } else {
                match Keyword::from_word(word) {
                    Some(k) => Tok::Keyword(k),
                    None if word == "_" => Tok::Underscore,
                    None => Tok::Name(word),
                }
            };
            self.pos = end;
            return Ok(Token {
                tok,
                start,
                end,
                line,
                col,
            });
        }
        let (tok, len) = match b {
            b'0'..=b'9' => {
                let mut end = start + 1;
                while self.peek(end).is_some_and(|c| c.is_ascii_digit()) {
                    end += 1;
                }
                if self.char_at_byte(end).is_some_and(continues_name) {
                    return Err(Failure::new(
                        start,
                        "malformed integer literal: a number runs into a name",
                    ));
                }
                (
                    Tok::Int(self.text.get(start..end).unwrap_or("0")),
                    end - start,
                )
            }
            b'"' => {
                let (escaped, end) = self.string(start)?;
                (Tok::Str { escaped }, end - start)
            }
            b'\\' => (Tok::Lambda, 1),
            0xCE if next == Some(0xBB) => (Tok::Lambda, 2),
            b'.' => (Tok::Dot, 1),
            b'(' => (Tok::LParen, 1),
            b')' => (Tok::RParen, 1),
            b'{' => (Tok::LBrace, 1),
            b'}' => (Tok::RBrace, 1),
            b',' => (Tok::Comma, 1),
            b';' => (Tok::Semicolon, 1),
            b'=' => match next {
                Some(b'=') => (Tok::EqEq, 2),
                Some(b'>') => (Tok::Arrow, 2),
                _ => (Tok::Equals, 1),
            },
            b'!' if next == Some(b'=') => (Tok::NotEq, 2),
            b'<' if next == Some(b'=') => (Tok::Le, 2),
            b'<' => (Tok::Lt, 1),
            b'>' if next == Some(b'=') => (Tok::Ge, 2),
            b'>' => (Tok::Gt, 1),
            b'|' if next == Some(b'|') => (Tok::OrOr, 2),
            b'&' if next == Some(b'&') => (Tok::AndAnd, 2),
            b'+' if next == Some(b'+') => (Tok::PlusPlus, 2),
            b'+' => (Tok::Plus, 1),
            b'-' => (Tok::Minus, 1),
            b'*' => (Tok::Star, 1),
            b'/' => (Tok::Slash, 1),
            b'%' => (Tok::Percent, 1),
            _ => {
                let hint = match b {
                    b'!' => " (did you mean `!=` or `not`?)",
                    b'|' => " (did you mean `||`?)",
                    b'&' => " (did you mean `&&`?)",
                    _ => "",
                };
                return Err(Failure::new(
                    start,
                    format!("unexpected character {}{hint}", self.char_at(start)),
                ));
            }
        };
        let end = start + len;
        self.pos = end;
        Ok(Token {
            tok,
            start,
            end,
            line,
            col,
        })
    }

    /// Scan a string literal opening at `start`; returns whether it had escapes
    /// (its value is then in the buffer) and the offset just past it.
    fn string(&mut self, start: usize) -> Result<(bool, usize), Failure> {
        let mut at = start + 1;
        let mut chunk = at;
        let mut escaped = false;
        loop {
            match self.peek(at) {
                None => return Err(Failure::new(start, "unterminated string")),
                Some(b'"') => {
                    if escaped {
                        self.buffer.push_str(self.text.get(chunk..at).unwrap_or(""));
                    }
                    return Ok((escaped, at + 1));
                }
                Some(b'\\') => {
                    if !escaped {
                        escaped = true;
                        self.buffer.clear();
                    }
                    self.buffer.push_str(self.text.get(chunk..at).unwrap_or(""));
                    let (c, after) = self.escape(start, at)?;
                    self.buffer.push(c);
                    at = after;
                    chunk = at;
                }
                Some(_) => at += 1,
            }
        }
    }

    /// Decode the escape whose backslash is at `at`, in the string opened at
    /// `open`; returns the character and the offset after the escape.
    fn escape(&self, open: usize, at: usize) -> Result<(char, usize), Failure> {
        let simple = match self.peek(at + 1) {
            None => return Err(Failure::new(open, "unterminated string")),
            Some(b'n') => '\n',
            Some(b't') => '\t',
            Some(b'r') => '\r',
            Some(b'\\') => '\\',
            Some(b'"') => '"',
            Some(b'u') => return self.unicode_escape(at),
            Some(_) => {
                let shown = match self.text.get(at + 1..).and_then(|r| r.chars().next()) {
                    Some(c) if !c.is_control() => format!("`\\{c}`"),
                    Some(c) => format!("\\ followed by {c:?}"),
                    None => String::new(),
                };
                return Err(Failure::new(
                    at,
                    format!(
                        "unknown escape {shown} (the escapes are \\n \\t \\r \\\\ \\\" \\u{{…}})"
                    ),
                ));
            }
        };
        Ok((simple, at + 2))
    }

    /// Decode `\u{H…}` (1 to 6 hex digits) whose backslash is at `at`.
    fn unicode_escape(&self, at: usize) -> Result<(char, usize), Failure> {
        let malformed = || {
            Failure::new(
                at,
                "malformed escape: write \\u{…} with 1 to 6 hexadecimal digits",
            )
        };
        if self.peek(at + 2) != Some(b'{') {
            return Err(malformed());
        }
        let first = at + 3;
        let mut end = first;
        let mut value: u32 = 0;
        while let Some(digit) = self.peek(end).and_then(|c| char::from(c).to_digit(16)) {
            if end - first == 6 {
                return Err(malformed());
            }
            value = value * 16 + digit;
            end += 1;
        }
        if end == first || self.peek(end) != Some(b'}') {
            return Err(malformed());
        }
        match char::from_u32(value) {
            Some(c) => Ok((c, end + 1)),
            None => Err(Failure::new(
                at,
                format!("\\u{{{value:X}}} is not a Unicode scalar value"),
            )),
        }
    }
}
