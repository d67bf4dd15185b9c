//! Building terms from Rust with named variables: a [`Scope`] keeps the
//! binders in force and turns each name into its de Bruijn index (Pierce,
//! TAPL §6.1, the naming context Γ), so embedders never count indices.

use crate::term::{Arena, Arm, Term};

/// A name used where no binder of that name is in scope.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Scope};
/// let arena = Arena::new();
/// let scope = Scope::new(&arena);
/// assert_eq!(scope.var("price").unwrap_err().name(), "price");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("unbound name `{0}`")]
pub struct UnboundName(String);

impl UnboundName {
    /// The name that was not bound.
    ///
    /// # Examples
    ///
    /// ```
    /// let arena = orrery::Arena::new();
    /// let err = orrery::Scope::new(&arena).var("harbour_fee").unwrap_err();
    /// assert_eq!(err.name(), "harbour_fee");
    /// ```
    pub fn name(&self) -> &str {
        &self.0
    }
}

/// A naming context for building terms with names: each binder method pushes
/// its names while building the body and pops them after.
///
/// # Examples
///
/// ```
/// use orrery::{parse_term, Arena, Prim, Scope};
/// let arena = Arena::new();
/// let mut scope = Scope::new(&arena);
/// // \price qty. price * qty
/// let total = scope
///     .lam("price", |s| {
///         s.lam("qty", |s| Ok(arena.prim(Prim::Mul, &[s.var("price")?, s.var("qty")?])))
///     })
///     .unwrap();
/// assert_eq!(total, parse_term(&arena, "\\p q. p * q").unwrap());
/// ```
#[derive(Debug)]
pub struct Scope<'a> {
    arena: &'a Arena,
    names: Vec<String>,
}

/// What a body-building closure returns.
///
/// # Examples
///
/// ```
/// use orrery::{Arena, Built, Scope};
/// let arena = Arena::new();
/// let mut scope = Scope::new(&arena);
/// fn read_count<'a>(s: &mut Scope<'a>) -> Built<'a> {
///     s.var("crate_count")
/// }
/// assert!(scope.lam("crate_count", read_count).is_ok());
/// assert!(scope.lam("bale_count", read_count).is_err());
/// ```
pub type Built<'a> = Result<&'a Term<'a>, UnboundName>;

impl<'a> Scope<'a> {
    /// An empty naming context over `arena`.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Scope};
    /// let arena = Arena::new();
    /// let scope = Scope::new(&arena);
    /// assert!(scope.var("anything").is_err());
    /// ```
    pub fn new(arena: &'a Arena) -> Self {
        Scope {
            arena,
            names: Vec::new(),
        }
    }

    /// The arena terms are built in.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Scope};
    /// let arena = Arena::new();
    /// let scope = Scope::new(&arena);
    /// assert!(std::ptr::eq(scope.arena(), &arena));
    /// ```
    pub fn arena(&self) -> &'a Arena {
        self.arena
    }

    /// The variable `name`, as the index of its nearest binder.
    ///
    /// # Errors
    ///
    /// [`UnboundName`] if no binder of that name is in scope.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Node, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// scope.bind("outer");
    /// scope.bind("inner");
    /// assert!(matches!(scope.var("outer").unwrap().node(), Node::Var(1)));
    /// ```
    pub fn var(&self, name: &str) -> Built<'a> {
        let position = self.names.iter().rev().position(|n| n == name);
        match position {
            Some(index) => Ok(self.arena.var(u32::try_from(index).unwrap_or(u32::MAX))),
            None => Err(UnboundName(name.to_string())),
        }
    }

    /// Enter a binder for `name` (innermost). Pair with [`unbind`](Scope::unbind).
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Node, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// scope.bind("tariff");
    /// assert!(matches!(scope.var("tariff").unwrap().node(), Node::Var(0)));
    /// ```
    pub fn bind(&mut self, name: &str) {
        self.names.push(name.to_string());
    }

    /// Leave the innermost binder.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Arena, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// scope.bind("tariff");
    /// scope.unbind();
    /// assert!(scope.var("tariff").is_err());
    /// ```
    pub fn unbind(&mut self) {
        self.names.pop();
    }

    /// Build `body` with `names` bound (the last innermost), then unbind them.
    fn under(&mut self, names: &[&str], body: impl FnOnce(&mut Self) -> Built<'a>) -> Built<'a> {
        let depth = self.names.len();
        self.names.extend(names.iter().map(|n| n.to_string()));
        let built = body(self);
        self.names.truncate(depth);
        built
    }

    /// `λparam. body`.
    ///
    /// # Errors
    ///
    /// Whatever `body` returns.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse_term, Arena, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// let keep = scope.lam("parcel", |s| s.var("parcel")).unwrap();
    /// assert_eq!(keep, parse_term(&arena, "\\x. x").unwrap());
    /// assert!(scope.lam("parcel", |s| s.var("letter")).is_err());
    /// ```
    pub fn lam(&mut self, param: &str, body: impl FnOnce(&mut Self) -> Built<'a>) -> Built<'a> {
        let body = self.under(&[param], body)?;
        Ok(self.arena.lam(body))
    }

    /// The recursive function `μλ` named `function` with argument `param`.
    ///
    /// # Errors
    ///
    /// Whatever `body` returns.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse_term, Arena, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// let spin = scope.rec_lam("spin", "n", |s| Ok(arena.app(s.var("spin")?, s.var("n")?))).unwrap();
    /// assert_eq!(spin, parse_term(&arena, "rec f x. f x").unwrap());
    /// ```
    pub fn rec_lam(
        &mut self,
        function: &str,
        param: &str,
        body: impl FnOnce(&mut Self) -> Built<'a>,
    ) -> Built<'a> {
        let body = self.under(&[function, param], body)?;
        Ok(self.arena.rec_lam(body))
    }

    /// `let name = bound in body`.
    ///
    /// # Errors
    ///
    /// Whatever `body` returns.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse_term, Arena, Prim, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// let t = scope
    ///     .let_in("tip", arena.int(4), |s| Ok(arena.prim(Prim::Add, &[s.var("tip")?, arena.int(20)])))
    ///     .unwrap();
    /// assert_eq!(t, parse_term(&arena, "let t = 4 in t + 20").unwrap());
    /// ```
    pub fn let_in(
        &mut self,
        name: &str,
        bound: &'a Term<'a>,
        body: impl FnOnce(&mut Self) -> Built<'a>,
    ) -> Built<'a> {
        let body = self.under(&[name], body)?;
        Ok(self.arena.let_in(bound, body))
    }

    /// A case arm `tag(fields…) ⇒ body`, with the fields bound in the body.
    ///
    /// # Errors
    ///
    /// Whatever `body` returns.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{parse_term, Arena, Scope};
    /// let arena = Arena::new();
    /// let mut scope = Scope::new(&arena);
    /// let arm = scope.arm("Cons", &["head", "tail"], |s| s.var("head")).unwrap();
    /// let t = arena.case(arena.con("Nil", &[]), &[arm], Some(arena.int(0)));
    /// assert_eq!(t, parse_term(&arena, "case Nil of { Cons(h, t) => h; _ => 0 }").unwrap());
    /// ```
    pub fn arm(
        &mut self,
        tag: &str,
        fields: &[&str],
        body: impl FnOnce(&mut Self) -> Built<'a>,
    ) -> Result<Arm<'a>, UnboundName> {
        let body = self.under(fields, body)?;
        let arity = u32::try_from(fields.len()).unwrap_or(u32::MAX);
        Ok(Arm::new(self.arena.tag(tag), arity, body))
    }
}
