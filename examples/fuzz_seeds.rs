//! Writes the seed corpus of the loader fuzz targets: one valid model file per learner,
//! task and splitter (container format 1; tree payloads of format 2, and two of the tree
//! format 1 still read) into `fuzz/corpus/model_file` and
//! `fuzz/corpus/model_file_fixed_crc`, and their kind byte + payload into
//! `fuzz/corpus/model_payload`. Run from the repository root:
//! `cargo run --example fuzz_seeds` (`make fuzz` does it first).

use std::fs;
use std::path::Path;

fn main() -> std::io::Result<()> {
    let root = Path::new("fuzz/corpus");
    for target in ["model_file", "model_file_fixed_crc", "model_payload"] {
        fs::create_dir_all(root.join(target))?;
    }
    let seeds = bagwise::fuzzing::seed_files();
    for (name, file) in &seeds {
        fs::write(root.join("model_file").join(format!("seed_{name}")), file)?;
        fs::write(
            root.join("model_file_fixed_crc")
                .join(format!("seed_{name}")),
            file,
        )?;
        let payload = bagwise::fuzzing::payload_input(file).expect("a seed file reads back");
        fs::write(
            root.join("model_payload").join(format!("seed_{name}")),
            payload,
        )?;
    }
    println!(
        "wrote {} seed files per target under {}",
        seeds.len(),
        root.display()
    );
    Ok(())
}
