//! Block decoder: arbitrary bytes as a compressed frame (`decode_block`) and as a
//! decompressed block (`parse_block`); a block that parses is rebuilt into samples
//! (`rebuild_block`: prediction, dequantization, inverse FFT). None may panic.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let fft = cyclarc::signal::RealFft::shared();
    if let Ok(b) = cyclarc::codec::parse::decode_block(data) {
        let _ = cyclarc::codec::rebuild_block(&b, fft);
    }
    if let Ok(b) = cyclarc::codec::parse::parse_block(data) {
        let _ = cyclarc::codec::rebuild_block(&b, fft);
    }
});
