//! The README's two commands are the ones CI uses (issue 8): the first runs the demo, the second
//! the tests, and `.ci/run` runs exactly that test command.

use std::fs;
use std::path::Path;

fn read(name: &str) -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join(name);
    fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The commands in the first fenced block after the "Two commands" heading.
fn readme_commands() -> Vec<String> {
    let readme = read("README.md");
    let section = readme
        .split("\n## ")
        .find(|s| s.starts_with("Two commands"))
        .expect("README.md has a '## Two commands' section");
    let block = section
        .split("```")
        .nth(1)
        .expect("the section has a fenced code block");
    block
        .lines()
        .skip(1) // the fence's info string
        .map(str::trim)
        .filter(|l| !l.is_empty() && !l.starts_with('#'))
        .map(str::to_string)
        .collect()
}

#[test]
fn readme_gives_the_demo_and_the_test_command() {
    let commands = readme_commands();
    assert_eq!(commands.len(), 2, "exactly two commands: {commands:?}");
    assert_eq!(commands[0], "cargo run --release -- demo");
    assert!(
        commands[1].starts_with("cargo test"),
        "second command runs the tests: {}",
        commands[1]
    );
}

#[test]
fn ci_runs_the_readme_test_command() {
    let commands = readme_commands();
    let ci = read(".ci/run");
    let ci_commands: Vec<&str> = ci
        .lines()
        .map(str::trim)
        .filter(|l| !l.starts_with('#'))
        .collect();
    assert!(
        ci_commands.contains(&commands[1].as_str()),
        ".ci/run must run the README's test command {:?}",
        commands[1]
    );
}
