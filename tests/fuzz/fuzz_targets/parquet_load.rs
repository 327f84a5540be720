//! Fuzz target: any bytes given to the Parquet loader return a table or an error naming the file;
//! no panic escapes it. A table it accepts is hashed too. The loader catches panics raised inside
//! the parquet crate and reports them as corrupt files, so the panic hook is silenced here (it
//! would otherwise abort on caught panics); a panic that escapes the loader still aborts, and
//! libFuzzer records the crash.
#![no_main]

use libfuzzer_sys::fuzz_target;

static QUIET: std::sync::Once = std::sync::Once::new();

fuzz_target!(|data: &[u8]| {
    QUIET.call_once(|| std::panic::set_hook(Box::new(|_| {})));
    if let Ok(table) = tabcard::data::parquet::read_table_from_bytes(data.to_vec(), std::path::Path::new("fuzz.parquet")) {
        let _ = table.content_hash();
    }
});
