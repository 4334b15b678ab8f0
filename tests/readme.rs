//! The README's sample outputs are what the commands print now: each
//! ```text block that follows a demo command is regenerated here and
//! compared. `LAPSE_BLESS_README=1 cargo test --release --test readme`
//! rewrites the blocks (the script that keeps them current).

mod common;
use common::*;

/// (the command's arguments, run from the repository root; the first line
/// of its block in the README).
const SAMPLES: &[(&[&str], &str)] =
    &[(&["run", "pipelines/pulsar_demo.toml"], "pipeline   pipelines/pulsar_demo.toml"), (&["run", "pipelines/tracking_demo.toml"], "pipeline   pipelines/tracking_demo.toml")];

#[test]
fn readme_samples_match_the_commands() {
    let readme_path = root().join("README.md");
    let mut readme = std::fs::read_to_string(&readme_path).unwrap();
    let bless = std::env::var_os("LAPSE_BLESS_README").is_some();
    for (args, first_line) in SAMPLES {
        let o = std::process::Command::new(env!("CARGO_BIN_EXE_lapse")).args(*args).current_dir(root()).output().unwrap();
        assert_eq!(o.status.code(), Some(0), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
        let got = String::from_utf8(o.stdout).unwrap();
        let start = readme.find(&format!("```text\n{first_line}\n")).unwrap_or_else(|| panic!("no README block starting {first_line:?}")) + "```text\n".len();
        let end = start + readme[start..].find("```").unwrap();
        if bless {
            readme.replace_range(start..end, &got);
        } else {
            assert_eq!(&readme[start..end], got, "README sample of `lapse {}` drifted (LAPSE_BLESS_README=1 regenerates it)", args.join(" "));
        }
    }
    if bless {
        std::fs::write(&readme_path, readme).unwrap();
    }
}
