//! The open-term toolkit (SEMANTICS §1.2: shift, substitution and
//! instantiation on any term) against the exercises of Pierce, *Types and
//! Programming Languages* (2002), §6.2–6.3. The published facts about
//! running programs (tak, Ackermann, Fibonacci, Church numerals, queens,
//! division) are corpus files under `tests/corpus/`, each with its source.

use orrery::toolkit::{instantiate, shift, subst};
use orrery::Arena;

#[test]
fn shifting_of_exercise_6_2_2() {
    // Pierce, TAPL (2002), §6.2, exercise 6.2.2 (solutions from memory):
    // ↑²(λ.λ. 1 (0 2)) = λ.λ. 1 (0 4); ↑²(λ. 0 1 (λ. 0 1 2)) = λ. 0 3 (λ. 0 1 4).
    let a = Arena::new();
    let t1 = a.lam(a.lam(a.app(a.var(1), a.app(a.var(0), a.var(2)))));
    let r1 = a.lam(a.lam(a.app(a.var(1), a.app(a.var(0), a.var(4)))));
    assert_eq!(shift(&a, t1, 2, 0).unwrap(), r1);
    let t2 = a.lam(a.app(
        a.app(a.var(0), a.var(1)),
        a.lam(a.app(a.app(a.var(0), a.var(1)), a.var(2))),
    ));
    let r2 = a.lam(a.app(
        a.app(a.var(0), a.var(3)),
        a.lam(a.app(a.app(a.var(0), a.var(1)), a.var(4))),
    ));
    assert_eq!(shift(&a, t2, 2, 0).unwrap(), r2);
    // A downward shift that would go below zero is refused.
    assert!(shift(&a, a.var(0), -1, 0).is_err());
}

#[test]
fn substitution_of_exercise_6_2_5() {
    // Pierce, TAPL (2002), §6.2, exercise 6.2.5, in the context a, b (so b is
    // 0 and a is 1); solutions from memory.
    let a = Arena::new();
    // [b ↦ a](b (λx.λy.b)) = [0 ↦ 1](0 (λ.λ.2)) = 1 (λ.λ.3)
    let t = a.app(a.var(0), a.lam(a.lam(a.var(2))));
    assert_eq!(
        subst(&a, t, 0, a.var(1)).unwrap(),
        a.app(a.var(1), a.lam(a.lam(a.var(3))))
    );
    // [b ↦ a (λz.a)](b (λx.b)) = (1 (λ.2)) (λ. (2 (λ.3)))
    let t = a.app(a.var(0), a.lam(a.var(1)));
    let s = a.app(a.var(1), a.lam(a.var(2)));
    let want = a.app(
        a.app(a.var(1), a.lam(a.var(2))),
        a.lam(a.app(a.var(2), a.lam(a.var(3)))),
    );
    assert_eq!(subst(&a, t, 0, s).unwrap(), want);
    // [b ↦ a](λb. b a) = [0 ↦ 1](λ. 0 2) = λ. 0 2
    let t = a.lam(a.app(a.var(0), a.var(2)));
    assert_eq!(subst(&a, t, 0, a.var(1)).unwrap(), t);
    // [b ↦ a](λa. b a) = [0 ↦ 1](λ. 1 0) = λ. 2 0
    let t = a.lam(a.app(a.var(1), a.var(0)));
    assert_eq!(
        subst(&a, t, 0, a.var(1)).unwrap(),
        a.lam(a.app(a.var(2), a.var(0)))
    );
}

#[test]
fn beta_as_shift_substitute_shift() {
    // Pierce, TAPL (2002), §6.3: (λ.t) v → ↑⁻¹([0 ↦ ↑¹ v] t). Compare the
    // combined `instantiate` with the three textbook operations.
    let a = Arena::new();
    let body = a.app(a.app(a.var(1), a.var(0)), a.lam(a.app(a.var(1), a.var(3))));
    for v in [a.var(0), a.lam(a.var(1)), a.int(5)] {
        let v_up = shift(&a, v, 1, 0).unwrap();
        let textbook = shift(&a, subst(&a, body, 0, v_up).unwrap(), -1, 0).unwrap();
        assert_eq!(instantiate(&a, body, &[v]).unwrap(), textbook);
    }
}
