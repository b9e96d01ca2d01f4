//! Archive reader: arbitrary bytes as an archive file, through `Archive::open` and
//! `decode_channels`. The parquet crate panics on some damaged footers; `Archive::open`
//! contains those and returns `Damaged`, so only an escaped panic is a finding.
#![no_main]

use std::sync::Once;

use libfuzzer_sys::fuzz_target;

static HOOK: Once = Once::new();

fuzz_target!(|data: &[u8]| {
    // libFuzzer's hook aborts on every panic; keep it for all but the contained ones.
    HOOK.call_once(cyclarc::fsio::quiet_contained_panics);
    let path = std::env::temp_dir().join(format!("cyclarc-fuzz-{}.parquet", std::process::id()));
    if std::fs::write(&path, data).is_err() {
        return;
    }
    if let Ok(a) = cyclarc::Archive::open(&path, cyclarc::DigestPolicy::Skip) {
        let _ = cyclarc::archive::decode_channels(
            &a,
            &[],
            None,
            None,
            cyclarc::signal::RealFft::shared(),
        );
    }
});
