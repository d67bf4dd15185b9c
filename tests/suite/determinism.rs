//! Determinism of call-by-value reduction (Plotkin, "Call-by-name,
//! call-by-value and the λ-calculus", 1975): every closed term that is not a
//! value has exactly one decomposition into an evaluation context and a redex,
//! and the stepper contracts exactly that redex. It needs the stepper's single
//! steps, so it is built with the `stepper` feature only.

use crate::common::gen::{all_decompositions, build, program};
use orrery::machines::stepper::{step, Step};
use orrery::{Arena, Program};
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig { cases: 3000, ..ProptestConfig::default() })]

    #[test]
    fn each_closed_term_has_one_decomposition(g in program()) {
        let arena = Arena::new();
        let mut t = build(&arena, &g, 0);
        prop_assert!(Program::new(t).is_ok());
        // Follow up to 40 steps, checking every intermediate term.
        for _ in 0..40 {
            let redexes = all_decompositions(t);
            if t.is_value() {
                prop_assert!(redexes.is_empty());
                prop_assert!(matches!(step(&arena, t), Step::Value));
                break;
            }
            prop_assert_eq!(redexes.len(), 1, "term {:?}", orrery::print(t));
            match step(&arena, t) {
                Step::Contracted { redex, next, .. } => {
                    prop_assert_eq!(redex, redexes[0]);
                    prop_assert!(next.is_closed());
                    t = next;
                }
                Step::Stuck { redex, .. } => {
                    prop_assert_eq!(redex, redexes[0]);
                    break;
                }
                Step::Value => prop_assert!(false, "a non-value gave no step"),
            }
        }
    }
}
