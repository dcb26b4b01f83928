//! The compile errors of the most common mistakes, checked against the
//! messages in tests/ui/*.stderr so that they cannot silently get worse.
//! After an intended change of a message, regenerate them with
//! `TRYBUILD=overwrite cargo test --test compile_errors` and review the diff.

#[test]
fn common_mistakes_are_reported_at_the_mistake() {
    let cases = trybuild::TestCases::new();
    cases.compile_fail("tests/ui/*.rs");
}
