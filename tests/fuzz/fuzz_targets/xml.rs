//! Any bytes through the xml reader: it may reject them, never panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use perihelix::config::{Station, StationList};
use perihelix::ingest::{read_text, Format};

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let stations = StationList::new([Station {
            code: "XQ1".into(),
            name: "Invented site".into(),
            longitude_deg: 0.0,
            latitude_deg: 0.0,
            height_m: 0.0,
            sigma_arcsec: None,
        }]);
        let read = read_text("fuzz", text, Format::AdesXml, &stations);
        // Every rejection must render.
        for r in &read.rejected {
            let _ = r.to_string();
        }
    }
});
