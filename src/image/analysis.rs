//! Functions and their free variables, found once per program.
//!
//! A *function* is a curried chain: a `λ` or `μλ` head and the unshared
//! `λ`s directly under it (at most [`MAX_CHAIN`] parameters), applied by the
//! environment machines to all its parameters at once, with the partial
//! applications in between as values of their own (the eval/apply model of
//! Marlow and Peyton Jones, "Making a fast curry", 2004). Its closure is
//! flat (Cardelli, "Compiling a functional language", 1984): it captures
//! exactly the function's free variables, ordered by binding level, outermost
//! first.
//!
//! What is recorded is linear in the program, up to a log factor, even where
//! the free-variable sets themselves are quadratic (nested functions that all
//! use one long list of variables): each function's captured values are
//! described as *runs* of its enclosing function's captured values and
//! locals, and each free variable occurrence gets its slot. The sets are
//! computed by small-to-large merging on the tree of functions ("DSU on
//! tree": each function keeps the set of its heaviest child and re-adds the
//! others), with a Fenwick tree (Fenwick, "A new data structure for cumulative
//! frequency tables", 1994) giving each level's rank among the present ones,
//! so the work is O(n log² n) for n variable occurrences.

use smallvec::SmallVec;

use super::{Capture, Func, INode, Id, Image, NONE};

/// The most parameters one function takes; a longer chain of `λ`s is a
/// function returning a function.
pub(crate) const MAX_CHAIN: u32 = 64;

/// A variable occurrence: the level of its binder (binders above it, from
/// the root of its tree), its node, and its innermost function.
#[derive(Clone, Copy, Debug)]
struct Occ {
    level: u32,
    node: Id,
    owner: u32,
}

/// A function while it is analysed (index 0 of a tree: the top level).
#[derive(Clone, Debug)]
struct Scan {
    /// The level of its first binder (a `μλ`'s self, or its first parameter).
    d: u32,
    /// Its entry in [`Image::funcs`] (`NONE` for the top level).
    func: u32,
    /// Its occurrences (its own and its nested functions') in `occ`.
    start: u32,
    end: u32,
}

/// Find every function of `image`, its capture runs, and the slot of every
/// free variable occurrence. Each shared (closed) node is the root of a tree
/// of its own.
pub(crate) fn analyse(image: &mut Image) {
    let mut roots = vec![image.root];
    roots
        .extend((0..image.nodes.len() as Id).filter(|&id| image.is_shared(id) && id != image.root));
    let mut tree = Tree::default();
    for root in roots {
        tree.scan(image, root);
        tree.solve(image);
    }
}

/// The scratch of one tree's analysis, reused for the next.
#[derive(Default)]
struct Tree {
    scans: Vec<Scan>,
    occ: Vec<Occ>,
    /// Per function: its children, the heaviest last.
    children: Vec<SmallVec<[u32; 4]>>,
    /// Occurrence indices grouped by owner, and where each owner's start.
    direct: Vec<u32>,
    direct_at: Vec<u32>,
    max_level: u32,
    /// Occurrences per level among those present, and the levels present.
    count: Vec<u32>,
    present: Fenwick,
    /// Per function: its capture runs once its parent is finished.
    runs: Vec<SmallVec<[Capture; 2]>>,
}

/// The analysis's work: a node to visit at a binder depth inside a function,
/// or the end of a function's occurrences.
enum ScanItem {
    Visit(Id, u32, u32),
    End(u32),
}

impl Tree {
    /// Walk the tree of `root`: record its functions (marking their chain
    /// nodes in the image) and its variable occurrences.
    fn scan(&mut self, image: &mut Image, root: Id) {
        self.scans.clear();
        self.occ.clear();
        self.max_level = 0;
        self.scans.push(Scan {
            d: 0,
            func: NONE,
            start: 0,
            end: 0,
        });
        let mut parent: Vec<u32> = vec![NONE];
        let mut stack = vec![ScanItem::End(0), ScanItem::Visit(root, 0, 0)];
        while let Some(item) = stack.pop() {
            let (id, depth, f) = match item {
                ScanItem::End(f) => {
                    self.scans[f as usize].end = self.occ.len() as u32;
                    continue;
                }
                ScanItem::Visit(id, depth, f) => (id, depth, f),
            };
            if id != root && image.is_shared(id) {
                continue;
            }
            match image.node(id) {
                INode::Var { index, .. } => {
                    if let Some(level) = depth.checked_sub(index.saturating_add(1)) {
                        self.max_level = self.max_level.max(level);
                        self.occ.push(Occ {
                            level,
                            node: id,
                            owner: f,
                        });
                    }
                }
                INode::Lam { body, .. } | INode::RecLam { body, .. } => {
                    let rec = matches!(image.node(id), INode::RecLam { .. });
                    let func = image.funcs.len() as u32;
                    let mut binders = 1 + u32::from(rec);
                    let mut params = 1;
                    let mut inner = body;
                    let chain = image.chains.len() as u32;
                    image.chains.push(id);
                    while params < MAX_CHAIN && !image.is_shared(inner) {
                        let INode::Lam { body, .. } = image.node(inner) else {
                            break;
                        };
                        image.nodes[inner as usize] = INode::Lam {
                            body,
                            func,
                            pos: params,
                        };
                        image.chains.push(inner);
                        params += 1;
                        binders += 1;
                        inner = body;
                    }
                    image.nodes[id as usize] = if rec {
                        INode::RecLam { body, func }
                    } else {
                        INode::Lam { body, func, pos: 0 }
                    };
                    image.funcs.push(Func {
                        head: id,
                        body: inner,
                        params,
                        rec,
                        captured: 0,
                        runs: 0,
                        runs_len: 0,
                        chain,
                    });
                    let g = self.scans.len() as u32;
                    self.scans.push(Scan {
                        d: depth,
                        func,
                        start: self.occ.len() as u32,
                        end: 0,
                    });
                    parent.push(f);
                    stack.push(ScanItem::End(g));
                    stack.push(ScanItem::Visit(inner, depth.saturating_add(binders), g));
                }
                INode::App(a, b) | INode::Let(a, b) => {
                    let inner = u32::from(matches!(image.node(id), INode::Let(..)));
                    stack.push(ScanItem::Visit(b, depth.saturating_add(inner), f));
                    stack.push(ScanItem::Visit(a, depth, f));
                }
                INode::If(c, y, n) => {
                    stack.extend([n, y, c].map(|x| ScanItem::Visit(x, depth, f)));
                }
                INode::Prim(op, start) => {
                    let ops = image.operands(op, start);
                    stack.extend(ops.iter().rev().map(|&x| ScanItem::Visit(x, depth, f)));
                }
                INode::Con(_, start, len) => {
                    let fields = image.list(start, len);
                    stack.extend(fields.iter().rev().map(|&x| ScanItem::Visit(x, depth, f)));
                }
                INode::Case(scrutinee, c) => {
                    let case = image.cases[c as usize];
                    if case.default != NONE {
                        stack.push(ScanItem::Visit(case.default, depth, f));
                    }
                    for arm in image.case_arms(&case).iter().rev() {
                        stack.push(ScanItem::Visit(
                            arm.body,
                            depth.saturating_add(arm.arity),
                            f,
                        ));
                    }
                    stack.push(ScanItem::Visit(scrutinee, depth, f));
                }
                INode::Int(_) | INode::Bool(_) | INode::Str(_) => {}
            }
        }
        // Children of each function, the heaviest (most occurrences) last.
        let n = self.scans.len();
        self.children.clear();
        self.children.resize(n, SmallVec::new());
        for (g, &p) in parent.iter().enumerate().skip(1) {
            self.children[p as usize].push(g as u32);
        }
        for f in 0..n {
            let kids = &mut self.children[f];
            if let Some(heaviest) = (0..kids.len()).max_by_key(|&k| {
                let s = &self.scans[kids[k] as usize];
                s.end - s.start
            }) {
                let last = kids.len() - 1;
                kids.swap(heaviest, last);
            }
        }
        // Occurrences grouped by their own function.
        self.direct_at.clear();
        self.direct_at.resize(n + 1, 0);
        for o in &self.occ {
            self.direct_at[o.owner as usize + 1] += 1;
        }
        for f in 0..n {
            self.direct_at[f + 1] += self.direct_at[f];
        }
        let mut fill = self.direct_at.clone();
        self.direct.clear();
        self.direct.resize(self.occ.len(), 0);
        for (k, o) in self.occ.iter().enumerate() {
            let at = &mut fill[o.owner as usize];
            self.direct[*at as usize] = k as u32;
            *at += 1;
        }
        self.runs.clear();
        self.runs.resize(n, SmallVec::new());
    }

    /// Give every function of the scanned tree its runs, and every free
    /// occurrence its slot: small-to-large over the tree of functions.
    fn solve(&mut self, image: &mut Image) {
        let levels = self.max_level as usize + 1;
        self.count.clear();
        self.count.resize(levels, 0);
        self.present.reset(levels);
        // (function, keep its set for the parent, next child to process)
        let mut stack: Vec<(u32, bool, usize)> = vec![(0, true, 0)];
        while let Some(top) = stack.last_mut() {
            let (f, keep, next) = *top;
            let kids = self.children[f as usize].len();
            if next < kids {
                top.2 += 1;
                // The heaviest child is last, and the only one kept.
                let child = self.children[f as usize][next];
                stack.push((child, next + 1 == kids, 0));
                continue;
            }
            stack.pop();
            self.finish(image, f, keep);
        }
        for (g, runs) in self.runs.iter().enumerate().skip(1) {
            let func = self.scans[g].func as usize;
            let at = image.runs.len() as u32;
            image.runs.extend_from_slice(runs);
            let captured = runs
                .iter()
                .map(|r| match *r {
                    Capture::Free { len, .. } | Capture::Local { len, .. } => len,
                })
                .sum();
            if let Some(entry) = image.funcs.get_mut(func) {
                entry.runs = at;
                entry.runs_len = runs.len() as u32;
                entry.captured = captured;
            }
        }
    }

    /// Add an occurrence at `level`; whether the level was absent.
    fn add(&mut self, level: u32) -> bool {
        let c = &mut self.count[level as usize];
        *c += 1;
        if *c == 1 {
            self.present.add(level as usize, 1);
            true
        } else {
            false
        }
    }

    /// Remove one occurrence at `level`.
    fn remove(&mut self, level: u32) {
        let c = &mut self.count[level as usize];
        if *c > 0 {
            *c -= 1;
            if *c == 0 {
                self.present.add(level as usize, -1);
            }
        }
    }

    /// The present levels in `from..to`, ascending.
    fn present_in(&self, from: u32, to: u32) -> Vec<u32> {
        let mut out = Vec::new();
        let mut k = self.present.prefix(from as usize);
        loop {
            let level = self.present.kth(k);
            if level >= to as usize || level >= self.count.len() {
                return out;
            }
            out.push(level as u32);
            k += 1;
        }
    }

    /// Everything for function `f` once its children are done and its
    /// heaviest child's set is present (see the module documentation).
    fn finish(&mut self, image: &mut Image, f: u32, keep: bool) {
        let fu = f as usize;
        let d = self.scans[fu].d;
        let kids = self.children[fu].clone();
        let (heavy, lights) = match kids.split_last() {
            Some((&h, rest)) => (Some(h), rest),
            None => (None, &[][..]),
        };
        // The heaviest child's set is present: its levels from `d` up are
        // locals of `f` it captures.
        let heavy_locals = match heavy {
            Some(h) => self.present_in(d, self.scans[h as usize].d),
            None => Vec::new(),
        };
        // Levels free in `f` that the heaviest child does not use.
        let mut new: Vec<u32> = Vec::new();
        let (from, to) = (self.direct_at[fu] as usize, self.direct_at[fu + 1] as usize);
        for k in from..to {
            let level = self.occ[self.direct[k] as usize].level;
            if level < d && self.add(level) {
                new.push(level);
            }
        }
        let mut light_sets: Vec<(u32, Vec<u32>, Vec<u32>)> = Vec::with_capacity(lights.len());
        for &g in lights {
            let scan = &self.scans[g as usize];
            let (dg, start, end) = (scan.d, scan.start as usize, scan.end as usize);
            let (mut free, mut local) = (Vec::new(), Vec::new());
            for k in start..end {
                let level = self.occ[k].level;
                if level >= dg {
                    continue;
                }
                if level < d {
                    if self.add(level) {
                        new.push(level);
                    }
                    free.push(level);
                } else {
                    local.push(level);
                }
            }
            free.sort_unstable();
            free.dedup();
            local.sort_unstable();
            local.dedup();
            light_sets.push((g, free, local));
        }
        // Now the present levels below `d` are `f`'s captured values, in
        // order: a level's rank is its slot.
        let captured = self.present.prefix(d as usize) as u32;
        for k in from..to {
            let o = self.occ[self.direct[k] as usize];
            if o.level < d {
                let slot = self.present.prefix(o.level as usize) as u32;
                if let INode::Var { index, .. } = image.node(o.node) {
                    image.nodes[o.node as usize] = INode::Var { index, slot };
                }
            }
        }
        if let Some(h) = heavy {
            new.sort_unstable();
            let mut runs: SmallVec<[Capture; 2]> = SmallVec::new();
            let mut next = 0;
            for &level in &new {
                let rank = self.present.prefix(level as usize) as u32;
                if rank > next {
                    runs.push(Capture::Free {
                        slot: next,
                        len: rank - next,
                    });
                }
                next = rank + 1;
            }
            if captured > next {
                runs.push(Capture::Free {
                    slot: next,
                    len: captured - next,
                });
            }
            local_runs(&mut runs, &heavy_locals, self.scans[h as usize].d);
            self.runs[h as usize] = runs;
        }
        for (g, free, local) in light_sets {
            let mut runs: SmallVec<[Capture; 2]> = SmallVec::new();
            for level in free {
                let rank = self.present.prefix(level as usize) as u32;
                match runs.last_mut() {
                    Some(Capture::Free { slot, len }) if *slot + *len == rank => *len += 1,
                    _ => runs.push(Capture::Free { slot: rank, len: 1 }),
                }
            }
            local_runs(&mut runs, &local, self.scans[g as usize].d);
            self.runs[g as usize] = runs;
        }
        // `f`'s own locals are nothing to its parent.
        for level in self.present_in(d, self.count.len() as u32) {
            self.count[level as usize] = 0;
            self.present.add(level as usize, -1);
        }
        if !keep {
            let (start, end) = (self.scans[fu].start as usize, self.scans[fu].end as usize);
            for k in start..end {
                let level = self.occ[k].level;
                if level < d {
                    self.remove(level);
                }
            }
        }
    }
}

/// Append the runs of locals at the ascending `levels`, seen from a head
/// whose first binder is at level `d`.
fn local_runs(runs: &mut SmallVec<[Capture; 2]>, levels: &[u32], d: u32) {
    let mut k = 0;
    while k < levels.len() {
        let first = levels[k];
        let mut len = 1;
        while k + (len as usize) < levels.len() && levels[k + len as usize] == first + len {
            len += 1;
        }
        runs.push(Capture::Local {
            index: d - 1 - first,
            len,
        });
        k += len as usize;
    }
}

/// A Fenwick tree of counts over `0..n`.
#[derive(Default)]
struct Fenwick {
    tree: Vec<i64>,
}

impl Fenwick {
    fn reset(&mut self, n: usize) {
        self.tree.clear();
        self.tree.resize(n + 1, 0);
    }

    fn add(&mut self, at: usize, delta: i64) {
        let mut i = at + 1;
        while i < self.tree.len() {
            self.tree[i] += delta;
            i += i & i.wrapping_neg();
        }
    }

    /// The sum over `0..to`.
    fn prefix(&self, to: usize) -> u64 {
        let mut i = to.min(self.tree.len().saturating_sub(1));
        let mut sum = 0i64;
        while i > 0 {
            sum += self.tree[i];
            i &= i - 1;
        }
        sum.max(0) as u64
    }

    /// The smallest `i` with `prefix(i + 1) > k` (the `k`-th present level,
    /// from 0), or `n` if there is none.
    fn kth(&self, k: u64) -> usize {
        let n = self.tree.len().saturating_sub(1);
        let mut pos = 0;
        let mut rem = k as i64;
        let mut step = n.checked_next_power_of_two().unwrap_or(0);
        while step > 0 {
            if pos + step <= n && self.tree[pos + step] <= rem {
                pos += step;
                rem -= self.tree[pos];
            }
            step >>= 1;
        }
        pos
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::term::{Arena, Term};
    use crate::{HostFunctions, Prim};

    /// What a closure of `func` captures, from its runs: for each captured
    /// value, the enclosing function's slot or a local's de Bruijn index.
    fn sources(image: &Image, func: &Func) -> Vec<Capture> {
        let runs = &image.runs[func.runs as usize..(func.runs + func.runs_len) as usize];
        let mut out = Vec::new();
        for run in runs {
            match *run {
                Capture::Free { slot, len } => {
                    out.extend((slot..slot + len).map(|s| Capture::Free { slot: s, len: 1 }))
                }
                Capture::Local { index, len } => out.extend((0..len).map(|k| Capture::Local {
                    index: index - k,
                    len: 1,
                })),
            }
        }
        out
    }

    /// The naive analysis: every function's free levels, walked explicitly.
    /// Returns, per function head, its expected sources, and per variable
    /// node its expected slot.
    /// Per function head its capture sources, and per variable its slot.
    type Naive = (Vec<(Id, Vec<Capture>)>, Vec<(Id, u32)>);

    /// A node to visit, its depth, and the enclosing functions' first levels
    /// and captured levels.
    type Visit = (Id, u32, Vec<(u32, Vec<u32>)>);

    fn naive(image: &Image) -> Naive {
        let mut heads: Vec<(Id, Vec<Capture>)> = Vec::new();
        let mut slots: Vec<(Id, u32)> = Vec::new();
        // Free levels of the function whose head is `head`: walk its body.
        fn free_levels(image: &Image, body: Id, depth: u32, d: u32, out: &mut Vec<u32>) {
            let mut stack = vec![(body, depth)];
            while let Some((id, depth)) = stack.pop() {
                match image.node(id) {
                    INode::Var { index, .. } => {
                        let level = depth - 1 - index;
                        if level < d {
                            out.push(level);
                        }
                    }
                    INode::Lam { body, .. } => stack.push((body, depth + 1)),
                    INode::RecLam { body, .. } => stack.push((body, depth + 2)),
                    INode::App(a, b) => stack.extend([(a, depth), (b, depth)]),
                    INode::Let(a, b) => stack.extend([(a, depth), (b, depth + 1)]),
                    INode::If(a, b, c) => stack.extend([(a, depth), (b, depth), (c, depth)]),
                    INode::Prim(op, s) => {
                        stack.extend(image.operands(op, s).iter().map(|&x| (x, depth)))
                    }
                    INode::Con(_, s, n) => {
                        stack.extend(image.list(s, n).iter().map(|&x| (x, depth)))
                    }
                    INode::Case(s, c) => {
                        let case = image.cases[c as usize];
                        stack.push((s, depth));
                        for arm in image.case_arms(&case) {
                            stack.push((arm.body, depth + arm.arity));
                        }
                        if case.default != NONE {
                            stack.push((case.default, depth));
                        }
                    }
                    _ => {}
                }
            }
            out.sort_unstable();
            out.dedup();
        }
        // Walk the whole tree, keeping the chain of enclosing functions.
        let mut stack: Vec<Visit> = vec![(image.root, 0, vec![(0, vec![])])];
        while let Some((id, depth, fs)) = stack.pop() {
            let (d, caps) = fs.last().cloned().unwrap();
            match image.node(id) {
                INode::Var { index, .. } => {
                    let level = depth - 1 - index;
                    if level < d {
                        slots.push((id, caps.iter().position(|&c| c == level).unwrap() as u32));
                    } else {
                        slots.push((id, super::super::LOCAL));
                    }
                }
                INode::Lam { func, .. } | INode::RecLam { func, .. } => {
                    let f = image.funcs[func as usize];
                    let binders = f.params + u32::from(f.rec);
                    let mut mine = Vec::new();
                    free_levels(image, f.body, depth + binders, depth, &mut mine);
                    let src = mine
                        .iter()
                        .map(|&l| {
                            if l < d {
                                Capture::Free {
                                    slot: caps.iter().position(|&c| c == l).unwrap() as u32,
                                    len: 1,
                                }
                            } else {
                                Capture::Local {
                                    index: depth - 1 - l,
                                    len: 1,
                                }
                            }
                        })
                        .collect();
                    heads.push((id, src));
                    let mut inner = fs.clone();
                    inner.push((depth, mine));
                    stack.push((f.body, depth + binders, inner));
                }
                INode::App(a, b) => stack.extend([(a, depth, fs.clone()), (b, depth, fs)]),
                INode::Let(a, b) => stack.extend([(a, depth, fs.clone()), (b, depth + 1, fs)]),
                INode::If(a, b, c) => stack.extend([
                    (a, depth, fs.clone()),
                    (b, depth, fs.clone()),
                    (c, depth, fs),
                ]),
                INode::Prim(op, s) => {
                    for &x in image.operands(op, s) {
                        stack.push((x, depth, fs.clone()));
                    }
                }
                INode::Con(_, s, n) => {
                    for &x in image.list(s, n) {
                        stack.push((x, depth, fs.clone()));
                    }
                }
                INode::Case(s, c) => {
                    let case = image.cases[c as usize];
                    stack.push((s, depth, fs.clone()));
                    for arm in image.case_arms(&case) {
                        stack.push((arm.body, depth + arm.arity, fs.clone()));
                    }
                    if case.default != NONE {
                        stack.push((case.default, depth, fs.clone()));
                    }
                }
                _ => {}
            }
        }
        (heads, slots)
    }

    fn check(t: &Term<'_>) -> (usize, usize) {
        let image = Image::build(t, &HostFunctions::new()).unwrap();
        let free_runs = image
            .runs
            .iter()
            .filter(|r| matches!(r, Capture::Free { .. }))
            .count();
        let free_slots = image
            .nodes
            .iter()
            .filter(|n| matches!(n, INode::Var { slot, .. } if *slot != super::super::LOCAL))
            .count();
        let (heads, slots) = naive(&image);
        for (head, expected) in heads {
            let func = match image.node(head) {
                INode::Lam { func, .. } | INode::RecLam { func, .. } => image.funcs[func as usize],
                _ => unreachable!(),
            };
            assert_eq!(sources(&image, &func), expected, "head {head}");
            assert_eq!(func.captured as usize, expected.len());
        }
        for (var, slot) in slots {
            let INode::Var { slot: got, .. } = image.node(var) else {
                unreachable!()
            };
            assert_eq!(got, slot, "var node {var}");
        }
        (free_runs, free_slots)
    }

    /// A small deterministic generator of closed terms (no sharing).
    fn random_term<'a>(arena: &'a Arena, seed: &mut u64, depth: u32, size: u32) -> &'a Term<'a> {
        let mut next = || {
            *seed ^= *seed << 13;
            *seed ^= *seed >> 7;
            *seed ^= *seed << 17;
            *seed
        };
        if size == 0 || next() % 5 == 0 {
            return if depth > 0 && next() % 4 != 0 {
                arena.var((next() % u64::from(depth)) as u32)
            } else {
                arena.int(1)
            };
        }
        match next() % 7 {
            0 | 1 => arena.lam(random_term(arena, seed, depth + 1, size - 1)),
            2 => arena.rec_lam(random_term(arena, seed, depth + 2, size - 1)),
            3 => arena.app(
                random_term(arena, seed, depth, size / 2),
                random_term(arena, seed, depth, size / 2),
            ),
            4 => arena.let_in(
                random_term(arena, seed, depth, size / 2),
                random_term(arena, seed, depth + 1, size / 2),
            ),
            5 => arena.prim(
                Prim::Add,
                &[
                    random_term(arena, seed, depth, size / 2),
                    random_term(arena, seed, depth, size / 2),
                ],
            ),
            _ => arena.case(
                random_term(arena, seed, depth, size / 3),
                &[crate::Arm::new(
                    "Two",
                    2,
                    random_term(arena, seed, depth + 2, size / 3),
                )],
                Some(random_term(arena, seed, depth, size / 3)),
            ),
        }
    }

    #[test]
    fn runs_and_slots_match_the_naive_analysis() {
        let mut seed = 0x9e37_79b9_7f4a_7c15;
        let (mut runs, mut slots) = (0, 0);
        for _ in 0..3_000 {
            let arena = Arena::new();
            let t = random_term(&arena, &mut seed, 0, 40);
            let (r, s) = check(t);
            runs += r;
            slots += s;
        }
        // The generator makes functions that capture from their parents.
        assert!(runs > 1_000 && slots > 1_000, "{runs} runs, {slots} slots");
    }

    #[test]
    fn nested_functions_using_every_variable_give_linear_runs() {
        // λx1. λx2. … λxn. x1 + … + xn, split into functions of MAX_CHAIN
        // parameters: each captures all the variables above it, in one run.
        let n = 2_000;
        let arena = Arena::new();
        let mut body = arena.var(0);
        for i in 1..n {
            body = arena.prim(Prim::Add, &[body, arena.var(i)]);
        }
        let mut t = body;
        for _ in 0..n {
            t = arena.lam(t);
        }
        let image = Image::build(t, &HostFunctions::new()).unwrap();
        assert!(image.runs.len() <= 2 * image.funcs.len());
        let (free_runs, _) = check(t);
        assert!(free_runs > 0);
    }
}
