//! Writing named Arrow arrays as a Parquet file in memory (predictions, demo tables, test
//! fixtures): snappy or no compression, a chosen number of rows per row group.

use arrow::array::{Array, ArrayRef};
use arrow::datatypes::*;

use crate::error::{Error, Result};

/// How a Parquet file is written: compression and rows per row group.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WriteOptions {
    pub snappy: bool,
    pub row_group_rows: usize,
}

impl Default for WriteOptions {
    fn default() -> Self {
        WriteOptions { snappy: true, row_group_rows: 1 << 20 }
    }
}

/// Encodes named Arrow arrays of equal length as a Parquet file in memory.
pub fn encode(columns: Vec<(String, ArrayRef)>, options: WriteOptions) -> Result<Vec<u8>> {
    encode_with_metadata(columns, options, &[])
}

/// [`encode`], with key-value metadata in the file's footer.
pub fn encode_with_metadata(columns: Vec<(String, ArrayRef)>, options: WriteOptions, metadata: &[(String, String)]) -> Result<Vec<u8>> {
    use arrow::record_batch::RecordBatch;
    use parquet::arrow::ArrowWriter;
    use parquet::basic::Compression;
    use parquet::file::properties::WriterProperties;
    use std::sync::Arc;

    let engine = |e: String| Error::Encode(format!("Parquet: {e}"));
    let fields: Vec<Field> = columns.iter().map(|(name, a)| Field::new(name, a.data_type().clone(), a.null_count() > 0)).collect();
    let schema = Arc::new(Schema::new(fields));
    let batch = RecordBatch::try_new(schema.clone(), columns.into_iter().map(|(_, a)| a).collect()).map_err(|e| engine(e.to_string()))?;
    let props = WriterProperties::builder()
        .set_compression(if options.snappy { Compression::SNAPPY } else { Compression::UNCOMPRESSED })
        .set_max_row_group_row_count(Some(options.row_group_rows.max(1)))
        .set_key_value_metadata(
            (!metadata.is_empty())
                .then(|| metadata.iter().map(|(k, v)| parquet::file::metadata::KeyValue::new(k.clone(), v.clone())).collect()),
        )
        .build();
    let mut out = Vec::new();
    let mut writer = ArrowWriter::try_new(&mut out, schema, Some(props)).map_err(|e| engine(e.to_string()))?;
    writer.write(&batch).map_err(|e| engine(e.to_string()))?;
    writer.close().map_err(|e| engine(e.to_string()))?;
    Ok(out)
}
