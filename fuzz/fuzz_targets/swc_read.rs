//! Any bytes through the SWC reader and the tree builder: Ok or a located error, never a panic.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(file) = pollard::swc::parse_bytes(data, "fuzz.swc") {
        if let Ok(m) = pollard::Morphology::from_swc(file) {
            let _ = m.metrics();
            let _ = m.sholl(7.0);
            let again = pollard::Morphology::parse(&m.to_swc_string(&[]), "again.swc")
                .expect("written SWC reads back");
            assert_eq!(again.len(), m.len());
        }
    }
});
