//! The integration tests as one crate: one build and one link of the
//! library's generic code rather than one per file, which on a 2-core
//! machine was most of CI's time. Each file in `tests/` is a module here;
//! run one with `cargo test --test integration <file name>::`. The tests
//! that install a counting global allocator, and the compile-fail tests,
//! stay crates of their own (see `[[test]]` in Cargo.toml).

#[path = "../common/mod.rs"]
mod common;

#[path = "../bad_inputs.rs"]
mod bad_inputs;
#[path = "../batches.rs"]
mod batches;
#[path = "../bits.rs"]
mod bits;
#[path = "../boxed_sweep.rs"]
mod boxed_sweep;
#[path = "../combinators.rs"]
mod combinators;
#[path = "../cores.rs"]
mod cores;
#[path = "../external_values.rs"]
mod external_values;
#[path = "../laws_catalogue.rs"]
mod laws_catalogue;
#[path = "../laws_correct.rs"]
mod laws_correct;
#[path = "../laws_extremes.rs"]
mod laws_extremes;
#[path = "../laws_formulas.rs"]
mod laws_formulas;
#[path = "../laws_wrong.rs"]
mod laws_wrong;
#[path = "../learning.rs"]
mod learning;
#[path = "../learning_references.rs"]
mod learning_references;
#[path = "../messages.rs"]
mod messages;
#[path = "../nist.rs"]
mod nist;
#[path = "../per_element.rs"]
mod per_element;
#[path = "../primitives.rs"]
mod primitives;
#[path = "../retention.rs"]
mod retention;
#[path = "../vector_loops.rs"]
mod vector_loops;
#[path = "../word_by_word.rs"]
mod word_by_word;
#[path = "../workspace.rs"]
mod workspace;
