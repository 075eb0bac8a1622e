//! The README's function reference is generated from the functions' own
//! documentation; this test fails when it falls out of date.
//! Regenerate with: POSTERITY_BLESS=1 cargo test --test it readme

const START: &str = "<!-- function reference: generated from src/docs.rs -->";
const END: &str = "<!-- end of function reference -->";

#[test]
fn readme_reference_matches_the_code() {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/README.md");
    let readme = std::fs::read_to_string(path).expect("README.md");
    let start = readme.find(START).expect("reference start marker") + START.len();
    let end = readme.find(END).expect("reference end marker");
    let generated = posterity::docs::reference_markdown();
    if std::env::var_os("POSTERITY_BLESS").is_some() {
        let updated = format!(
            "{}\n{}\n{}",
            &readme[..start],
            generated.trim(),
            &readme[end..]
        );
        std::fs::write(path, updated).expect("write README.md");
        return;
    }
    assert_eq!(
        readme[start..end].trim(),
        generated.trim(),
        "README function reference is stale: run POSTERITY_BLESS=1 cargo test --test it readme"
    );
}

#[test]
fn readme_starts_with_the_job_and_names_the_two_commands() {
    let readme =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/README.md")).unwrap();
    let first = readme
        .lines()
        .find(|l| !l.starts_with('#') && !l.trim().is_empty())
        .unwrap();
    assert!(first.contains("categorical"), "{first}");
    assert!(readme.contains("cargo run -- demo"));
    assert!(readme.contains("cargo test"));
    let ci = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/.ci/run")).unwrap();
    assert!(
        ci.contains("cargo test"),
        ".ci/run must call the README's test command"
    );
}
