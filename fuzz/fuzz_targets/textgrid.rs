//! Fuzz target: see `harness::textgrid`.
#![no_main]

use std::path::PathBuf;
use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;

#[path = "../harness.rs"]
mod harness;

fn dir() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d =
            std::env::temp_dir().join(format!("voxstrata-fuzz-textgrid-{}", std::process::id()));
        std::fs::create_dir_all(&d).expect("temporary folder for fuzz inputs");
        d
    })
}

fuzz_target!(|data: &[u8]| {
    harness::textgrid(dir(), data);
});
