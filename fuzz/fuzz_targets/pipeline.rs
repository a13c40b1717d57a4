//! Any bytes through the whole pipeline: read → cable maps; every number that comes out is
//! finite or the step returns an error.
#![no_main]
use libfuzzer_sys::fuzz_target;
use pollard::cable::{Maps, Network, Params};

fuzz_target!(|data: &[u8]| {
    let Ok(m) = pollard::swc::parse_bytes(data, "fuzz.swc")
        .and_then(pollard::Morphology::from_swc)
    else {
        return;
    };
    let flat = m.flatten();
    for freq in [0.0, 100.0] {
        if let Ok(net) = Network::build(&flat, &Params::default(), freq) {
            let maps = Maps::new(&net);
            let _ = maps.soma_transfer(&net.parent);
            let _ = maps.site_ratio(&net, flat.len() - 1);
        }
    }
});
