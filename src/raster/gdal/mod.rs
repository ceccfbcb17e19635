//! Every raster format GDAL reads, behind the same [`RasterSource`] trait as the pure-Rust
//! GeoTIFF reader; CRS handling through GDAL's spatial-reference API; reprojection onto a
//! target grid through GDAL's warper; point transforms; OGR vector input.
//!
//! GDAL dataset handles are not thread-safe, so [`GdalSource`] keeps a small pool of
//! read-only handles on the same file: a read takes one (opening another when all are
//! busy) and gives it back, so blocks can be read from several threads at once. Files are
//! only ever opened read-only.
//!
//! GDAL's failures come back inside terrastack's errors (naming the file and the fix), so
//! GDAL's own printing of them is turned off on first use; its warnings and debug
//! messages (with `CPL_DEBUG=ON`) still go to standard error.

mod crs;
mod vector;
mod warp;

use std::path::{Path, PathBuf};
use std::sync::Mutex;

use gdal::errors::GdalError;
use gdal::raster::{ColorInterpretation, GdalDataType};
use gdal::{Dataset, DatasetOptions, GdalOpenFlags, Metadata};
use ndarray::Array2;

pub use crs::{complete_crs, crs_from_srs, crs_from_user, same_crs, transform_points};
pub use vector::{read_vector, Geometry, VectorFeature};
pub use warp::warp_window;

use super::orientation::Orientation;
use super::{check_band, BandInfo, RasterSource, SampleType};
use crate::error::{Error, Result};
use crate::grid::{Crs, CrsKind, Grid, RasterSpace, Window};

/// A raster opened through GDAL, read window by window.
///
/// Reads convert samples to `f32` (through `f64`, so that nodata is compared at the
/// stored precision), turn the band's nodata value, NaN, and cells that the band's mask
/// (an internal per-dataset mask or an alpha band, as orthomosaics often carry) marks as
/// empty (mask value 0) into NaN, and fill the cells of a window outside the raster with
/// NaN; only the part of the window inside the raster is read from the file.
/// Where a band's empty cells are marked, besides its nodata value.
#[derive(Clone, Copy, Debug, PartialEq)]
enum MaskSource {
    /// Only the nodata value (or nothing).
    None,
    /// GDAL's mask band for the band (an internal per-dataset mask, or an alpha band
    /// GDAL itself applies).
    Gdal,
    /// This band of the file is an alpha band (colour interpretation "alpha"); 0 means
    /// empty. Multispectral orthomosaics carry one after their five bands, where GDAL
    /// does not apply it by itself.
    Alpha(usize),
}

pub struct GdalSource {
    path: PathBuf,
    /// The north-up grid (see [`crate::raster::orientation`]).
    grid: Grid,
    /// How the file stores its rows and columns.
    orientation: Orientation,
    space: RasterSpace,
    bands: Vec<BandInfo>,
    /// Per band: what marks cells without data besides the nodata value.
    masks: Vec<MaskSource>,
    /// Idle read-only handles on `path`.
    pool: Mutex<Vec<Dataset>>,
}

impl GdalSource {
    /// Open `path` read-only through GDAL and read its geometry, CRS and band metadata.
    ///
    /// The grid's transform is GDAL's geotransform (pixel-is-area corners, as GDAL
    /// reports it for every format); a raster without one gets GDAL's default
    /// `[0, 1, 0, 0, 0, 1]` and no CRS. Rotated or sheared transforms are refused.
    pub fn open(path: &Path) -> Result<GdalSource> {
        if !path.exists() {
            return Err(Error::io(
                path,
                std::io::Error::from(std::io::ErrorKind::NotFound),
            ));
        }
        let ds = open_raster(path)?;
        let count = ds.raster_count();
        if count == 0 {
            return Err(
                Error::file(path, "GDAL opens it, but it holds no raster band").with_fix(
                    "give a raster file (a DSM or orthomosaic), not a vector or container file",
                ),
            );
        }
        let (width, height) = ds.raster_size();
        let crs = match ds.spatial_ref() {
            Ok(srs) => crs_from_srs(&srs).map_err(|e| e.in_file(path))?,
            Err(_) => Crs::none(),
        };
        let georeferenced = ds.geo_transform().is_ok();
        let transform = match ds.geo_transform() {
            Ok(t) => t,
            Err(_) if crs.kind != CrsKind::Unknown || crs.epsg.is_some() => {
                return Err(Error::file(
                    path,
                    format!(
                        "it has a CRS ({}) but no geotransform, so where its cells lie and how large they are is not defined",
                        crs.label()
                    ),
                )
                .with_fix("export the raster again with its georeferencing, or set it with GDAL (`gdal_translate -a_ullr XMIN YMAX XMAX YMIN IN OUT.tif`)"));
            }
            Err(_) => [0.0, 1.0, 0.0, 0.0, 0.0, 1.0],
        };
        let mut bands = Vec::with_capacity(count);
        let mut masks = Vec::with_capacity(count);
        let alpha = ds
            .rasterband(count)
            .ok()
            .filter(|b| b.color_interpretation() == ColorInterpretation::AlphaBand)
            .map(|_| count);
        for b in 1..=count {
            let band = ds.rasterband(b).map_err(|e| gdal_file_error(path, &e))?;
            let sample_type = match band.band_type() {
                GdalDataType::UInt8 => SampleType::U8,
                GdalDataType::UInt16 => SampleType::U16,
                GdalDataType::Int16 => SampleType::I16,
                GdalDataType::UInt32 => SampleType::U32,
                GdalDataType::Int32 => SampleType::I32,
                GdalDataType::Float32 => SampleType::F32,
                GdalDataType::Float64 => SampleType::F64,
                other => {
                    return Err(Error::file(
                        path,
                        format!(
                            "band {b} has sample type {other:?}, which terrastack does not read"
                        ),
                    )
                    .with_fix("convert the raster to 8/16/32-bit integers or 32/64-bit floats"))
                }
            };
            let description = band.description().ok().filter(|d| !d.trim().is_empty());
            let flags = band.mask_flags().map_err(|e| gdal_file_error(path, &e))?;
            masks.push(match alpha {
                Some(a) if a != b => MaskSource::Alpha(a),
                Some(_) => MaskSource::None,
                None if !flags.is_all_valid() && !flags.is_nodata() => MaskSource::Gdal,
                None => MaskSource::None,
            });
            bands.push(BandInfo {
                description,
                sample_type,
                nodata: band.no_data_value(),
            });
        }
        let stored = Grid::new(width, height, transform, crs).map_err(|e| e.in_file(path))?;
        // Without a geotransform GDAL's default (rows downward) has no north to turn to.
        let orientation = if georeferenced {
            Orientation::of(&stored.transform)
        } else {
            Orientation::default()
        };
        let grid = orientation.normalise(stored).with_nodata(bands[0].nodata);
        let space = match ds.metadata_item("AREA_OR_POINT", "") {
            Some(v) if v.eq_ignore_ascii_case("point") => RasterSpace::Point,
            _ => RasterSpace::Area,
        };
        Ok(GdalSource {
            path: path.to_path_buf(),
            grid,
            orientation,
            space,
            bands,
            masks,
            pool: Mutex::new(vec![ds]),
        })
    }

    /// Run `f` with an idle dataset handle, opening a new one if none is idle.
    fn with_dataset<T>(&self, f: impl FnOnce(&Dataset) -> Result<T>) -> Result<T> {
        let idle = self.pool.lock().unwrap_or_else(|p| p.into_inner()).pop();
        let ds = match idle {
            Some(ds) => ds,
            None => open_raster(&self.path)?,
        };
        let out = f(&ds);
        self.pool.lock().unwrap_or_else(|p| p.into_inner()).push(ds);
        out
    }
}

impl RasterSource for GdalSource {
    fn path(&self) -> &Path {
        &self.path
    }

    fn grid(&self) -> &Grid {
        &self.grid
    }

    fn raster_space(&self) -> RasterSpace {
        self.space
    }

    fn band_count(&self) -> usize {
        self.bands.len()
    }

    fn band_info(&self, band: usize) -> BandInfo {
        self.bands[band - 1].clone()
    }

    fn read_window(&self, band: usize, window: Window) -> Result<Array2<f32>> {
        // A float64 beyond the float32 range reads as nodata, like ±inf.
        Ok(self.read_window_f64(band, window)?.mapv(|v| {
            let x = v as f32;
            if x.is_finite() {
                x
            } else {
                f32::NAN
            }
        }))
    }

    fn read_window_f64(&self, band: usize, window: Window) -> Result<Array2<f64>> {
        check_band(self, band)?;
        let mut out = Array2::from_elem((window.height, window.width), f64::NAN);
        // The file's own cells of the window (see `raster::orientation`); `out` is filled
        // in stored order and flipped to the north-up grid at the end.
        let window = self
            .orientation
            .stored_window(window, self.grid.width, self.grid.height);
        let Some(inside) = window.intersect(&Window::full(&self.grid)) else {
            return Ok(out);
        };
        let nodata = self.bands[band - 1].nodata;
        let mask_source = self.masks[band - 1];
        let (values, mask) = self.with_dataset(|ds| {
            let rb = ds
                .rasterband(band)
                .map_err(|e| gdal_file_error(&self.path, &e))?;
            let read_error = |what: &str, e: &GdalError| {
                Error::file(
                    &self.path,
                    format!(
                        "GDAL failed to read the {what} of band {band}, {} x {} cells at column {}, row {}: {}",
                        inside.width,
                        inside.height,
                        inside.col,
                        inside.row,
                        gdal_message(e)
                    ),
                )
                .with_fix("check that the file is complete and not truncated")
            };
            let mut buf = vec![0.0f64; inside.len()];
            rb.read_into_slice::<f64>(
                (inside.col as isize, inside.row as isize),
                (inside.width, inside.height),
                (inside.width, inside.height),
                &mut buf,
                None,
            )
            .map_err(|e| read_error("values", &e))?;
            let mask_band = match mask_source {
                MaskSource::None => None,
                MaskSource::Gdal => Some(rb.open_mask_band().map_err(|e| read_error("mask", &e))?),
                MaskSource::Alpha(a) => Some(ds.rasterband(a).map_err(|e| read_error("alpha band", &e))?),
            };
            let mask = match mask_band {
                Some(mb) => {
                    let mut m = vec![0.0f64; inside.len()];
                    mb.read_into_slice::<f64>(
                        (inside.col as isize, inside.row as isize),
                        (inside.width, inside.height),
                        (inside.width, inside.height),
                        &mut m,
                        None,
                    )
                    .map_err(|e| read_error("mask", &e))?;
                    Some(m)
                }
                None => None,
            };
            Ok((buf, mask))
        })?;
        let r0 = (inside.row - window.row) as usize;
        let c0 = (inside.col - window.col) as usize;
        for (i, row) in values.chunks_exact(inside.width).enumerate() {
            let mut dst = out.row_mut(r0 + i);
            for (j, &v) in row.iter().enumerate() {
                let empty = mask
                    .as_ref()
                    .is_some_and(|m| m[i * inside.width + j] == 0.0);
                // ±inf reads as nodata too.
                let is_nodata = empty || !v.is_finite() || nodata.is_some_and(|nd| v == nd);
                dst[c0 + j] = if is_nodata { f64::NAN } else { v };
            }
        }
        self.orientation.reorient(&mut out);
        Ok(out)
    }
}

/// GDAL's error handler for terrastack: failures are silent (they are returned, with
/// GDAL's text, in terrastack's errors); warnings and debug messages go to stderr.
unsafe extern "C" fn report_gdal_message(
    class: gdal_sys::CPLErr::Type,
    _number: gdal_sys::CPLErrorNum,
    msg: *const std::ffi::c_char,
) {
    use std::io::Write;
    let label = match class {
        gdal_sys::CPLErr::CE_Warning => "GDAL warning",
        gdal_sys::CPLErr::CE_Debug => "GDAL",
        _ => return,
    };
    let text = if msg.is_null() {
        std::borrow::Cow::Borrowed("")
    } else {
        // SAFETY: GDAL passes a NUL-terminated message valid for this call.
        unsafe { std::ffi::CStr::from_ptr(msg) }.to_string_lossy()
    };
    let _ = writeln!(std::io::stderr(), "{label}: {text}");
}

/// Install [`report_gdal_message`] as GDAL's error handler, once per process.
pub(crate) fn quiet_gdal_failures() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        // SAFETY: the handler is a plain function valid for the life of the process.
        unsafe {
            gdal_sys::CPLSetErrorHandler(Some(report_gdal_message));
        }
    });
}

/// Open `path` read-only as a raster, with GDAL's error text in the message.
fn open_raster(path: &Path) -> Result<Dataset> {
    quiet_gdal_failures();
    Dataset::open_ex(
        path,
        DatasetOptions {
            open_flags: GdalOpenFlags::GDAL_OF_READONLY | GdalOpenFlags::GDAL_OF_RASTER,
            ..Default::default()
        },
    )
    .map_err(|e| {
        Error::file(
            path,
            format!("GDAL cannot open it as a raster: {}", gdal_message(&e)),
        )
        .with_fix("check that the file is complete and in a raster format GDAL reads")
    })
}

/// GDAL's own error text, without the Rust binding's wrapping.
pub(crate) fn gdal_message(e: &GdalError) -> String {
    let msg = match e {
        GdalError::CplError { msg, .. } | GdalError::NullPointer { msg, .. } => msg.clone(),
        other => other.to_string(),
    };
    let msg = msg.trim().to_string();
    if msg.is_empty() {
        e.to_string()
    } else {
        msg
    }
}

/// A GDAL error on `path` as a terrastack error.
fn gdal_file_error(path: &Path, e: &GdalError) -> Error {
    Error::file(path, format!("GDAL error: {}", gdal_message(e)))
        .with_fix("check that the file is complete and in a raster format GDAL reads")
}

#[cfg(test)]
mod tests {
    use super::*;
    use gdal::DriverManager;

    /// A 5 x 4 Int16 GTiff in UTM 33N with nodata −9999 at (row 1, col 2).
    fn write_small(dir: &Path) -> PathBuf {
        let path = dir.join("small.tif");
        let drv = DriverManager::get_driver_by_name("GTiff").unwrap();
        let mut ds = drv.create_with_band_type::<i16, _>(&path, 5, 4, 2).unwrap();
        ds.set_geo_transform(&[500_000.0, 2.0, 0.0, 4_000_000.0, 0.0, -2.0])
            .unwrap();
        ds.set_spatial_ref(&gdal::spatial_ref::SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        let mut data: Vec<i16> = (0..20).map(|v| v as i16 * 10).collect();
        data[5 + 2] = -9999;
        let mut b = ds.rasterband(1).unwrap();
        b.set_no_data_value(Some(-9999.0)).unwrap();
        let mut buf = gdal::raster::Buffer::new((5, 4), data);
        b.write((0, 0), (5, 4), &mut buf).unwrap();
        b.set_description("elevation").unwrap();
        path
    }

    #[test]
    fn window_clipped_and_nodata_nan() {
        let dir = tempfile::tempdir().unwrap();
        let path = write_small(dir.path());
        let src = GdalSource::open(&path).unwrap();
        assert_eq!(src.band_count(), 2);
        assert_eq!(src.grid().width, 5);
        assert_eq!(src.grid().crs.epsg, Some(32633));
        assert_eq!(src.grid().nodata, Some(-9999.0));
        let info = src.band_info(1);
        assert_eq!(info.sample_type, SampleType::I16);
        assert_eq!(info.description.as_deref(), Some("elevation"));
        // Window from (-1, -1), 3 x 3: row/col -1 outside → NaN.
        let w = src.read_window(1, Window::new(1, 0, 3, 3)).unwrap();
        // Values written as 10·(row·5 + col).
        assert_eq!(w[[0, 0]], 10.0);
        assert_eq!(w[[0, 2]], 30.0);
        assert!(w[[1, 1]].is_nan()); // the nodata cell (row 1, col 2)
        assert_eq!(w[[2, 2]], 130.0);
        let edge = src.read_window(1, Window::new(-1, 3, 3, 2)).unwrap();
        assert!(edge[[0, 0]].is_nan());
        assert_eq!(edge[[0, 1]], 150.0);
        assert!(edge.row(1).iter().all(|v| v.is_nan()));
        let outside = src.read_window(1, Window::new(10, 10, 2, 2)).unwrap();
        assert!(outside.iter().all(|v| v.is_nan()));
    }

    /// A 4 x 3 Float32 raster in UTM 33N, 10 m cells, value 100 + index, no nodata value;
    /// `alpha` chooses an alpha band instead of an internal per-dataset mask or an alpha band hiding column 0.
    fn write_masked(dir: &Path, alpha: bool) -> PathBuf {
        use gdal::raster::ColorInterpretation;
        let path = dir.join(if alpha { "alpha.tif" } else { "mask.tif" });
        let drv = DriverManager::get_driver_by_name("GTiff").unwrap();
        let bands = if alpha { 2 } else { 1 };
        let mut opts = gdal::cpl::CslStringList::new();
        if alpha {
            // The GTiff driver's creation option marking the last band as alpha.
            opts.set_name_value("ALPHA", "YES").unwrap();
        }
        let mut ds = drv
            .create_with_band_type_with_options::<f32, _>(&path, 4, 3, bands, &opts)
            .unwrap();
        ds.set_geo_transform(&[500_000.0, 10.0, 0.0, 5_000_000.0, 0.0, -10.0])
            .unwrap();
        ds.set_spatial_ref(&gdal::spatial_ref::SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        let data: Vec<f32> = (0..12).map(|v| 100.0 + v as f32).collect();
        let mut b = ds.rasterband(1).unwrap();
        b.write((0, 0), (4, 3), &mut gdal::raster::Buffer::new((4, 3), data))
            .unwrap();
        let m: Vec<u8> = (0..12).map(|i| if i % 4 == 0 { 0 } else { 255 }).collect();
        if alpha {
            let mut a = ds.rasterband(2).unwrap();
            a.set_color_interpretation(ColorInterpretation::AlphaBand)
                .unwrap();
            a.write((0, 0), (4, 3), &mut gdal::raster::Buffer::new((4, 3), m))
                .unwrap();
        } else {
            b.create_mask_band(true).unwrap();
            let mut mb = b.open_mask_band().unwrap();
            mb.write((0, 0), (4, 3), &mut gdal::raster::Buffer::new((4, 3), m))
                .unwrap();
        }
        path
    }

    #[test]
    fn mask_and_alpha_mark_empty_cells() {
        let dir = tempfile::tempdir().unwrap();
        for alpha in [false, true] {
            let path = write_masked(dir.path(), alpha);
            let src = GdalSource::open(&path).unwrap();
            let w = src.read_window(1, Window::new(0, 0, 4, 3)).unwrap();
            for r in 0..3 {
                assert!(w[[r, 0]].is_nan(), "alpha {alpha}: row {r}");
                assert_eq!(w[[r, 1]], 101.0 + 4.0 * r as f32);
            }
            // Warped onto itself by GDAL's warper, the hidden column stays empty.
            let w2 = crate::raster::gdal::warp_window(
                &path,
                1,
                src.grid(),
                Window::full(src.grid()),
                crate::raster::Resampling::Nearest,
            )
            .unwrap();
            for r in 0..3 {
                assert!(w2[[r, 0]].is_nan(), "warp, alpha {alpha}: row {r}");
                assert_eq!(w2[[r, 3]], 103.0 + 4.0 * r as f32);
            }
        }
    }

    #[test]
    fn bad_band_and_bad_file() {
        let dir = tempfile::tempdir().unwrap();
        let path = write_small(dir.path());
        let src = GdalSource::open(&path).unwrap();
        let e = src.read_window(3, Window::new(0, 0, 1, 1)).unwrap_err();
        assert!(e.to_string().contains("band 3 does not exist"), "{e}");
        let junk = dir.path().join("junk.dat");
        std::fs::write(&junk, b"this is not a raster").unwrap();
        let e = GdalSource::open(&junk).err().unwrap().to_string();
        assert!(e.contains("junk.dat") && e.contains("fix:"), "{e}");
        let e = GdalSource::open(&dir.path().join("missing.tif"))
            .err()
            .unwrap();
        assert_eq!(e.exit_code(), 1);
    }

    #[test]
    fn parallel_reads_agree() {
        use rayon::prelude::*;
        let dir = tempfile::tempdir().unwrap();
        let path = write_small(dir.path());
        let src = GdalSource::open(&path).unwrap();
        let sums: Vec<f32> = (0..32)
            .into_par_iter()
            .map(|_| {
                src.read_window(1, Window::new(0, 0, 5, 4))
                    .unwrap()
                    .iter()
                    .filter(|v| !v.is_nan())
                    .sum()
            })
            .collect();
        // Σ 10·k for k = 0..19, minus the nodata cell k = 7: 1900 − 70.
        assert!(sums.iter().all(|&s| s == 1830.0), "{sums:?}");
    }
}
