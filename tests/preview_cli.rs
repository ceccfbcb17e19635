//! `preview.png` end to end through the binary: the sheet of a flight's stack and of a
//! multi-temporal stack decodes (with the `png` crate, which shares no code with the
//! writer's drawing), has the size of the documented layout, and shows the nodata colour
//! exactly on the cells that are NaN in `stack.tif` (read back through the raster reader)
//! and nowhere else but the legend's swatch.

mod util;

use std::path::Path;

use terrastack::stack::preview::{Preview, RampKind, SheetHeading, NODATA_RGB, SWATCH};
use terrastack::stack::sidecar::StackMetadata;
use terrastack::Window;
use util::{p, run, stderr, surface, tempdir, utm_grid, write_dsm};

/// Decode an RGB PNG: (width, height, bytes).
fn decode(path: &Path) -> (usize, usize, Vec<u8>) {
    let file = std::fs::File::open(path).unwrap();
    let mut reader = png::Decoder::new(std::io::BufReader::new(file))
        .read_info()
        .unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    assert_eq!(info.color_type, png::ColorType::Rgb);
    buf.truncate(info.buffer_size());
    (info.width as usize, info.height as usize, buf)
}

/// Check the sheet of the stack in `dir` (see the module doc); returns the NaN cells of
/// all bands.
fn check_sheet(dir: &Path, heading: &SheetHeading) -> usize {
    let text = std::fs::read_to_string(dir.join("stack.json")).unwrap();
    let meta: StackMetadata = serde_json::from_str(&text).unwrap();
    let src = terrastack::raster::open(&dir.join("stack.tif")).unwrap();
    let grid = src.grid().clone();
    let preview = Preview::new(
        grid.width,
        grid.height,
        meta.bands
            .iter()
            .map(|b| (b.name.clone(), b.units.clone(), RampKind::for_band(b)))
            .collect(),
    );
    let layout = preview.layout(&grid, heading, &meta.bands);
    let (w, h, rgb) = decode(&dir.join("preview.png"));
    assert_eq!((w, h), (layout.width, layout.height));
    // Grids no larger than the thumbnail limit: one thumbnail pixel per cell.
    assert_eq!(layout.thumb_size, (grid.width, grid.height));
    let at = |x: usize, y: usize| {
        let o = (y * w + x) * 3;
        [rgb[o], rgb[o + 1], rgb[o + 2]]
    };
    let mut nan_cells = 0;
    for (k, &(tx, ty)) in layout.thumbs.iter().enumerate() {
        let band = src.read_window(k + 1, Window::full(&grid)).unwrap();
        for ((r, c), v) in band.indexed_iter() {
            assert_eq!(
                at(tx + c, ty + r) == NODATA_RGB,
                v.is_nan(),
                "{}: cell ({r}, {c}) = {v}",
                meta.bands[k].name
            );
            nan_cells += usize::from(v.is_nan());
        }
    }
    let (sx, sy) = layout.swatch;
    assert_eq!(at(sx, sy), NODATA_RGB);
    let painted = rgb.chunks(3).filter(|px| *px == NODATA_RGB).count();
    assert_eq!(painted, nan_cells + SWATCH.0 * SWATCH.1);
    nan_cells
}

#[test]
fn flight_sheet_has_its_layout_and_paints_exactly_the_nodata_cells() {
    let dir = tempdir();
    let grid = utm_grid(60, 40, 0.5);
    let mut z = surface(&grid);
    for r in 10..16 {
        for c in 20..28 {
            z[[r, c]] = f32::NAN; // a hole of 8 x 6 cells
        }
    }
    write_dsm(&dir.path().join("dsm.tif"), &grid, &z);
    let out = p(dir.path(), "north-field");
    let o = run(&[
        "build",
        "--dsm",
        &p(dir.path(), "dsm.tif"),
        "--features",
        "elevation,slope,aspect,tpi",
        "--scales",
        "1.5",
        "--date",
        "2026-07-08",
        "--out",
        &out,
        "-q",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let heading = SheetHeading::flight(Path::new(&out), Some("2026-07-08"));
    assert_eq!(heading.title, "flight north-field");
    let nan = check_sheet(Path::new(&out), &heading);
    // The elevation band alone has the 48 cells of the hole; slope, aspect and TPI more.
    assert!(nan > 4 * 48, "{nan}");
    // Four bands: two columns of 180 px tiles, narrower than the 600 px least sheet width.
    let (w, _, _) = decode(&Path::new(&out).join("preview.png"));
    assert_eq!(w, 600);
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(Path::new(&out).join("stack.json")).unwrap())
            .unwrap();
    assert_eq!(meta["bands"][0]["date"], "2026-07-08");
}

#[test]
fn a_date_that_is_not_a_calendar_date_is_refused() {
    let dir = tempdir();
    let grid = utm_grid(20, 20, 0.5);
    write_dsm(&dir.path().join("dsm.tif"), &grid, &surface(&grid));
    let out = p(dir.path(), "out");
    let o = run(&[
        "build",
        "--dsm",
        &p(dir.path(), "dsm.tif"),
        "--date",
        "2026-02-30",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2));
    let e = stderr(&o);
    assert!(e.contains("--date") && e.contains("day 30"), "{e}");
    assert!(!Path::new(&out).exists());
}

#[test]
fn multi_temporal_stack_has_a_sheet_too() {
    let dir = tempdir();
    let grid = utm_grid(50, 30, 0.5);
    let mut z = surface(&grid);
    write_dsm(&dir.path().join("a.tif"), &grid, &z);
    for r in 0..30 {
        z[[r, 49]] = f32::NAN; // the second flight misses the east column
    }
    write_dsm(&dir.path().join("b.tif"), &grid, &z);
    let manifest = dir.path().join("season.toml");
    std::fs::write(
        &manifest,
        "[batch]\nout = \"out\"\nalign = \"off\"\n[batch.recipe.features]\n\
         list = [\"slope\", \"tpi\"]\nscales_m = [1.5]\n\
         [[flight]]\nid = \"may\"\ndate = \"2026-05-02\"\ndsm = \"a.tif\"\n\
         [[flight]]\nid = \"june\"\ndate = \"2026-06-11\"\ndsm = \"b.tif\"\n",
    )
    .unwrap();
    let o = run(&["batch", manifest.to_str().unwrap(), "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let root = dir.path().join("out");
    check_sheet(
        &root.join("flights/may"),
        &SheetHeading::flight(&root.join("flights/may"), Some("2026-05-02")),
    );
    let temporal = root.join("temporal");
    let heading = SheetHeading::temporal(&["2026-05-02".into(), "2026-06-11".into()]);
    let nan = check_sheet(&temporal, &heading);
    assert!(nan > 0);
}
