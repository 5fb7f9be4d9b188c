//! Feeds arbitrary bytes to the CSV reader. Any panic is a bug: every input
//! must give a dataset or an error. A dataset must also keep its promises.
#![no_main]

#[path = "promises.rs"]
mod promises;

use libfuzzer_sys::fuzz_target;
use mixgauge_data::Format;

fuzz_target!(|bytes: &[u8]| promises::check(bytes, Format::Csv));
