//! Circuits over words run word by word: the gates over `Word`s pass every
//! law exactly, `WordByWord` agrees with the same gates run one after
//! another over whole `Bits` values (forward, backward, reusing and adding
//! passes, with partial last words), its reverse map is the circuit's run
//! word by word, shapes are checked, and a wrong word gate is caught.

use proptest::prelude::*;
use revdiff::bits::{AndGate, Bit, Bits, MuxGate, NotGate, OrGate, Word, WordByWord, XorGate};
use revdiff::laws::{Exhaustive, FiniteDomain};
use revdiff::*;

// Bit `e` of these is bit 0, 1 and 2 of `e`: together, at each bit
// position, one combination of up to three inputs.
const A: Word = Word(0xaaaa_aaaa_aaaa_aaaa);
const C: Word = Word(0xcccc_cccc_cccc_cccc);
const F: Word = Word(0xf0f0_f0f0_f0f0_f0f0);

/// A few words (law checks range over up to five slots at once).
fn words() -> Vec<Word> {
    vec![A, C, F]
}

/// Pairs that hold every combination of two inputs at once, and constants.
fn word_pairs() -> Vec<(Word, Word)> {
    vec![(A, C), (C, F), (Word(0), Word(u64::MAX))]
}

#[test]
fn gates_over_words_pass_every_law_exactly() {
    let checker = Exhaustive::<Bit>::new();
    let pairs = word_pairs();
    let on_pairs = FiniteDomain::new(pairs.clone(), pairs.clone(), words()).unwrap();
    for report in [
        checker.reverse(&XorGate, &on_pairs),
        checker.reverse(&AndGate, &on_pairs),
        checker.reverse(&OrGate, &on_pairs),
        checker.reverse(&XorGate.pair(AndGate).then(OrGate), &on_pairs),
    ] {
        report.assert_clean();
        assert!(report.checked().iter().any(|c| c.order == 2 && c.cases > 0));
    }
    let on_words = FiniteDomain::new(words(), words(), words()).unwrap();
    checker.reverse(&NotGate, &on_words).assert_clean();
    let triples = vec![(A, (C, F)), (F, (A, C)), (C, (Word(u64::MAX), Word(0)))];
    let on_triples = FiniteDomain::new(triples.clone(), triples, words()).unwrap();
    checker.reverse(&MuxGate, &on_triples).assert_clean();
}

#[test]
fn gates_over_words_compute_their_truth_tables() {
    // Truth tables (common practice, no source), with bit e of x and y
    // being bits 0 and 1 of e: (x, y) = (0,0), (1,0), (0,1), (1,1).
    let (x, y) = (Word(0b1010), Word(0b1100));
    assert_eq!(XorGate.forward(&(x, y)).unwrap(), Word(0b0110));
    assert_eq!(AndGate.forward(&(x, y)).unwrap(), Word(0b1000));
    assert_eq!(OrGate.forward(&(x, y)).unwrap(), Word(0b1110));
    assert_eq!(NotGate.forward(&x).unwrap().0 & 0b1111, 0b0101);
    // The multiplexer: b where s is 1, over (s, a, b) as bits 0, 1, 2 of e.
    let (s, a, b) = (Word(0xaa), Word(0xcc), Word(0xf0));
    let chosen = MuxGate.forward(&(s, (a, b))).unwrap().0;
    for e in 0..8 {
        let (s, a, b) = (e & 1 == 1, e >> 1 & 1 == 1, e >> 2 & 1 == 1);
        assert_eq!(chosen >> e & 1 == 1, if s { b } else { a }, "input {e:03b}");
    }
}

/// A three-layer circuit with every gate, `(a, b) -> (a, b)`; generic over
/// the values, so the same circuit runs gate by gate over `Bits` and over
/// words. Layer 1 gives `(c, d) = (a + b, a or b)`, layer 2
/// `((1 + c, d), c d)`, layer 3 `(g ? f : e, e or f)` from `((e, f), g)`.
macro_rules! every_gate {
    () => {
        XorGate
            .pair(OrGate)
            .then(NotGate.alongside(Id).pair(AndGate))
            .then(Snd.pair(Fst).then(MuxGate).pair(Fst.then(OrGate)))
    };
}

fn by_gates() -> impl Reverse<(Bits, Bits), Output = (Bits, Bits)> {
    every_gate!()
}

fn by_words() -> WordByWord<impl Reverse<(Word, Word), Output = (Word, Word)>> {
    WordByWord::new(every_gate!())
}

fn bits(wires: usize, examples: usize, seed: u64) -> Bits {
    Bits::from_fn(wires, examples, |w, e| {
        let z = (seed ^ (w as u64) << 32 ^ e as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15);
        z >> 61 & 1 == 1
    })
}

proptest! {
    #[test]
    fn word_by_word_agrees_with_gate_by_gate(
        wires in 1usize..4,
        examples in 0usize..200,
        seeds in proptest::array::uniform4(any::<u64>()),
    ) {
        let x = (bits(wires, examples, seeds[0]), bits(wires, examples, seeds[1]));
        let dz = (bits(wires, examples, seeds[2]), bits(wires, examples, seeds[3]));
        let (gates, words) = (by_gates(), by_words());
        let y = gates.forward(&x).unwrap();
        prop_assert_eq!(&words.forward(&x).unwrap(), &y);
        let dx = gates.backward(&x, &dz).unwrap();
        prop_assert_eq!(&words.backward(&x, &dz).unwrap(), &dx);
        // The reusing passes, twice into the same buffers, and adding.
        let mut work = Workspace::new();
        let mut change = (Bits::zeros(0, 0), Bits::zeros(0, 0));
        for _ in 0..2 {
            prop_assert_eq!(words.forward_reusing(&x, &mut work).unwrap(), &y);
            words.backward_reusing(&x, &mut work, &dz, &mut change).unwrap();
            prop_assert_eq!(&change, &dx);
        }
        words.backward_reusing_adding(&x, &mut work, &dz, &mut change).unwrap();
        prop_assert_eq!(change, (Bits::zeros(wires, examples), Bits::zeros(wires, examples)));
        // The reverse map, run word by word, is the gates' reverse map.
        let at = (x.clone(), dz.clone());
        let words_rev = Reverse::<(Bits, Bits)>::rev(&words);
        prop_assert_eq!(words_rev.forward(&at).unwrap(), gates.rev().forward(&at).unwrap());
    }
}

#[test]
fn word_by_word_passes_every_law_exactly_over_bits() {
    // One example of one wire in every slot (law checks range over up to
    // five slots at once); the padding of the word is cleared each time.
    let all = |examples: usize| -> Vec<Bits> {
        (0..1u64 << examples)
            .map(|c| Bits::from_fn(1, examples, |_, e| c >> e & 1 == 1))
            .collect()
    };
    let pairs: Vec<(Bits, Bits)> = all(1)
        .into_iter()
        .flat_map(|a| all(1).into_iter().map(move |b| (a.clone(), b)))
        .collect();
    let domain = FiniteDomain::new(pairs.clone(), pairs.clone(), pairs).unwrap();
    let report = Exhaustive::<Bit>::new().reverse(&by_words(), &domain);
    report.assert_clean();
    assert!(report.checked().iter().any(|c| c.order == 2 && c.cases > 0));
}

#[test]
fn bits_past_the_last_example_stay_clear() {
    // NOT turns the padding of a partial word to 1 inside the loop.
    let not = WordByWord::new(NotGate);
    let y = not.forward(&Bits::zeros(2, 70)).unwrap();
    assert_eq!(y.count_ones(), 140);
    assert_eq!(y, Bits::from_fn(2, 70, |_, _| true));
}

#[test]
fn shapes_that_differ_are_a_typed_error_naming_both() {
    let words = WordByWord::new(XorGate);
    let err = words
        .forward(&(Bits::zeros(1, 65), Bits::zeros(2, 65)))
        .unwrap_err();
    let text = err.to_string();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{text}");
    assert!(
        text.contains("(1 wires, 65 examples)") && text.contains("(2 wires, 65 examples)"),
        "{text}"
    );
    let x = (Bits::zeros(1, 65), Bits::zeros(1, 65));
    let err = words.backward(&x, &Bits::zeros(1, 64)).unwrap_err();
    assert!(err.to_string().contains("(1 wires, 64 examples)"), "{err}");
    let mut wrong = (Bits::zeros(1, 3), Bits::zeros(1, 3));
    let mut work = Workspace::new();
    words.forward_reusing(&x, &mut work).unwrap();
    assert!(
        words
            .backward_reusing_adding(&x, &mut work, &Bits::zeros(1, 65), &mut wrong)
            .is_err()
    );
}

/// OR over words with the `(1 + y)` factor dropped from its backward pass.
#[derive(Clone, Debug)]
struct OrWithoutFactor;
impl Compose for OrWithoutFactor {}
impl Map<(Word, Word)> for OrWithoutFactor {
    type Output = Word;
    type Memo = ();
    fn forward_memo(&self, (x, y): &(Word, Word)) -> Result<(Word, ())> {
        Ok((Word(x.0 | y.0), ()))
    }
    fn backward_memo(&self, _: &(), dz: &Word) -> Result<(Word, Word)> {
        Ok((*dz, *dz))
    }
}

#[test]
fn a_wrong_word_gate_is_caught_against_the_gate_it_claims_to_be() {
    let pairs = word_pairs();
    let domain = FiniteDomain::new(pairs.clone(), pairs, words()).unwrap();
    let report = Exhaustive::<Bit>::new().same_map(&OrWithoutFactor, &OrGate, &domain);
    // Broken at the first case: x = A, y = C, dz = A, where OR's backward
    // pass gives ((1 + y) dz, (1 + x) dz) = (A and not C, 0).
    let text = report.to_string();
    assert!(!report.is_clean(), "{text}");
    let expected = format!("({:#018x}, {:#018x})", A.0 & !C.0, 0);
    assert!(text.contains(&expected), "{text}");
    assert!(
        text.contains(&format!("({:#018x}, {:#018x})", A.0, A.0)),
        "{text}"
    );
}
