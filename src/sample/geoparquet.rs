//! GeoParquet training tables (GeoParquet 1.1.0 on Apache Parquet, written with the
//! `parquet` crate's core writer).
//!
//! The columns are the CSV table's ([`super::table`]), in its order, preceded by
//! `geometry`: the row's point (x, y in the stack's CRS) as ISO WKB (little-endian, type 1).
//! `sample_id`, `class` are UTF-8 strings; `x`, `y` float64; `fold` int32 (1-based);
//! `block` int64 and `cells` int32 when present; band columns float32 (cell rows) or
//! float64 (aggregated rows), null where the stack has nodata. Rows go in row groups of at
//! most [`ROW_GROUP`] rows; pages are Snappy-compressed.
//!
//! The file's key-value metadata `geo` holds the GeoParquet metadata: version 1.1.0,
//! primary column `geometry`, encoding WKB, geometry types `["Point"]`, the bbox of the
//! points, and `crs` as PROJJSON ([`crate::projjson`]). A CRS that cannot be described is
//! written as `null`, which GeoParquet reads as "unknown", and the run warns.

use std::io::Write;
use std::sync::Arc;

use parquet::basic::{Compression, LogicalType, Repetition, Type as Physical};
use parquet::data_type::{ByteArray, ByteArrayType, DoubleType, FloatType, Int32Type, Int64Type};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;
use parquet::schema::types::Type;
use serde_json::{json, Value};

use super::table::{Precision, SampleColumns, SampleTable};

/// Most rows per row group.
pub const ROW_GROUP: usize = 1 << 20;

/// GeoParquet version written.
pub const GEOPARQUET_VERSION: &str = "1.1.0";

/// ISO WKB of a 2-D point: byte order 1 (little-endian), geometry type 1, x, y.
pub fn wkb_point(x: f64, y: f64) -> [u8; 21] {
    let mut b = [0u8; 21];
    b[0] = 1;
    b[1..5].copy_from_slice(&1u32.to_le_bytes());
    b[5..13].copy_from_slice(&x.to_le_bytes());
    b[13..21].copy_from_slice(&y.to_le_bytes());
    b
}

/// The GeoParquet `geo` metadata of `table` with CRS `crs` (PROJJSON, or null: unknown).
pub fn geo_metadata(table: &SampleTable, crs: Option<Value>) -> Value {
    let mut bbox = [
        f64::INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
    ];
    for r in &table.rows {
        bbox = [
            bbox[0].min(r.x),
            bbox[1].min(r.y),
            bbox[2].max(r.x),
            bbox[3].max(r.y),
        ];
    }
    let mut column = json!({
        "encoding": "WKB",
        "geometry_types": ["Point"],
        "crs": crs,
    });
    if !table.rows.is_empty() {
        column["bbox"] = json!(bbox);
    }
    json!({
        "version": GEOPARQUET_VERSION,
        "primary_column": "geometry",
        "columns": {"geometry": column},
    })
}

fn io(e: parquet::errors::ParquetError) -> std::io::Error {
    std::io::Error::other(e)
}

fn column(name: &str, physical: Physical, repetition: Repetition) -> std::io::Result<Arc<Type>> {
    let mut b = Type::primitive_type_builder(name, physical).with_repetition(repetition);
    if physical == Physical::BYTE_ARRAY && name != "geometry" {
        b = b.with_logical_type(Some(LogicalType::String));
    }
    Ok(Arc::new(b.build().map_err(io)?))
}

/// Write `table` as GeoParquet to `out`, its columns named `names`
/// ([`SampleTable::column_names`]) after `geometry`, with GeoParquet metadata `geo`.
pub fn write_geoparquet<W: Write + Send>(
    out: W,
    table: &SampleTable,
    cols: &SampleColumns,
    names: &[String],
    geo: &Value,
) -> std::io::Result<()> {
    const OPTIONAL: Repetition = Repetition::OPTIONAL;
    const REQUIRED: Repetition = Repetition::REQUIRED;
    let fixed = 5 + usize::from(cols.blocks.is_some()) + usize::from(table.aggregated());
    let band_type = match table.precision {
        Precision::F32 => Physical::FLOAT,
        Precision::F64 => Physical::DOUBLE,
    };
    let mut fields = vec![column("geometry", Physical::BYTE_ARRAY, REQUIRED)?];
    for (i, name) in names.iter().enumerate() {
        let (t, rep) = match name.as_str() {
            _ if i >= fixed => (band_type, OPTIONAL),
            "sample_id" | "class" => (Physical::BYTE_ARRAY, REQUIRED),
            "x" | "y" => (Physical::DOUBLE, REQUIRED),
            "fold" | "cells" => (Physical::INT32, REQUIRED),
            _ => (Physical::INT64, REQUIRED),
        };
        fields.push(column(name, t, rep)?);
    }
    let schema = Type::group_type_builder("schema")
        .with_fields(fields)
        .build()
        .map_err(io)?;
    let props = WriterProperties::builder()
        .set_compression(Compression::SNAPPY)
        .set_created_by(format!("terrastack {}", env!("CARGO_PKG_VERSION")))
        .set_key_value_metadata(Some(vec![KeyValue::new("geo".into(), geo.to_string())]))
        .build();
    let mut writer =
        SerializedFileWriter::new(out, Arc::new(schema), Arc::new(props)).map_err(io)?;
    for rows in table.rows.chunks(ROW_GROUP) {
        let mut group = writer.next_row_group().map_err(io)?;
        let mut index = 0usize;
        while let Some(mut col) = group.next_column().map_err(io)? {
            let name = if index == 0 {
                "geometry"
            } else {
                names[index - 1].as_str()
            };
            let band = index.checked_sub(1 + fixed);
            match (name, band) {
                ("geometry", None) => {
                    let v: Vec<ByteArray> = rows
                        .iter()
                        .map(|r| ByteArray::from(wkb_point(r.x, r.y).to_vec()))
                        .collect();
                    col.typed::<ByteArrayType>().write_batch(&v, None, None)
                }
                ("sample_id" | "class", None) => {
                    let of = if name == "class" {
                        cols.classes
                    } else {
                        cols.ids
                    };
                    let v: Vec<ByteArray> = rows
                        .iter()
                        .map(|r| ByteArray::from(of[r.sample].as_str()))
                        .collect();
                    col.typed::<ByteArrayType>().write_batch(&v, None, None)
                }
                ("x" | "y", None) => {
                    let v: Vec<f64> = rows
                        .iter()
                        .map(|r| if name == "x" { r.x } else { r.y })
                        .collect();
                    col.typed::<DoubleType>().write_batch(&v, None, None)
                }
                ("fold", None) => {
                    let v: Vec<i32> = rows
                        .iter()
                        .map(|r| cols.folds[r.sample].map_or(0, |f| f as i32 + 1))
                        .collect();
                    col.typed::<Int32Type>().write_batch(&v, None, None)
                }
                ("cells", None) => {
                    let v: Vec<i32> = rows.iter().map(|r| r.cells as i32).collect();
                    col.typed::<Int32Type>().write_batch(&v, None, None)
                }
                ("block", None) => {
                    let blocks = cols.blocks.unwrap_or(&[]);
                    let v: Vec<i64> = rows
                        .iter()
                        .map(|r| blocks.get(r.sample).copied().flatten().unwrap_or(0) as i64)
                        .collect();
                    col.typed::<Int64Type>().write_batch(&v, None, None)
                }
                (_, Some(b)) => {
                    let def: Vec<i16> = rows
                        .iter()
                        .map(|r| i16::from(!r.values[b].is_nan()))
                        .collect();
                    let present = rows.iter().map(|r| r.values[b]).filter(|v| !v.is_nan());
                    match table.precision {
                        Precision::F32 => {
                            let v: Vec<f32> = present.map(|v| v as f32).collect();
                            col.typed::<FloatType>().write_batch(&v, Some(&def), None)
                        }
                        Precision::F64 => {
                            let v: Vec<f64> = present.collect();
                            col.typed::<DoubleType>().write_batch(&v, Some(&def), None)
                        }
                    }
                }
                _ => unreachable!("every column of the schema is written"),
            }
            .map_err(io)?;
            col.close().map_err(io)?;
            index += 1;
        }
        group.close().map_err(io)?;
    }
    writer.close().map_err(io)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sample::table::Row;

    #[test]
    fn wkb_of_a_point() {
        // ISO/OGC Simple Features WKB: 01 (NDR), 01000000 (Point), x, y as IEEE doubles.
        let b = wkb_point(1.0, -2.0);
        assert_eq!(&b[..5], &[1, 1, 0, 0, 0]);
        assert_eq!(&b[5..13], &1.0f64.to_le_bytes());
        assert_eq!(&b[13..], &(-2.0f64).to_le_bytes());
    }

    #[test]
    fn writes_a_parquet_file_with_geo_metadata() {
        let table = SampleTable {
            band_names: vec!["slope_horn".into()],
            precision: Precision::F32,
            rows: vec![
                Row {
                    sample: 0,
                    x: 10.0,
                    y: 20.0,
                    cells: 1,
                    values: vec![1.5],
                },
                Row {
                    sample: 0,
                    x: 12.0,
                    y: 18.0,
                    cells: 1,
                    values: vec![f64::NAN],
                },
            ],
        };
        let ids = ["a".to_string()];
        let classes = ["fen".to_string()];
        let cols = SampleColumns {
            ids: &ids,
            classes: &classes,
            folds: &[Some(1)],
            blocks: None,
        };
        let names = table.column_names(false).unwrap();
        let geo = geo_metadata(&table, crate::projjson::from_epsg(32633));
        assert_eq!(
            geo["columns"]["geometry"]["bbox"],
            json!([10.0, 18.0, 12.0, 20.0])
        );
        let mut buf = Vec::new();
        write_geoparquet(&mut buf, &table, &cols, &names, &geo).unwrap();
        // Parquet files start and end with the magic "PAR1" (Apache Parquet format spec).
        assert_eq!(&buf[..4], b"PAR1");
        assert_eq!(&buf[buf.len() - 4..], b"PAR1");
        let text = String::from_utf8_lossy(&buf);
        assert!(text.contains("\"version\":\"1.1.0\""));
        // pyarrow and geopandas read these files back in scripts/ci/catalog.sh.
    }
}
