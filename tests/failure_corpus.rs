//! The failure corpus: hostile inputs and mistyped flags run through the binary. Every
//! case must end with exit code 1, 2 or 3, no panic text, a message that names the file
//! or flag at fault, and nothing under a final name in the output folder. Files are
//! small: a file can declare a huge raster without holding it.

mod util;

use std::path::{Path, PathBuf};
use std::process::Output;

use util::{p, run, stderr, surface, tempdir, utm_grid, write_dsm};

/// Exit code of a finished run (None when killed by a signal).
fn code(o: &Output) -> Option<i32> {
    o.status.code()
}

/// Assert the run failed cleanly with one of terrastack's exit codes, without panic
/// text, with `names` in its message, and left no finished output in `out`.
fn assert_clean_failure(o: &Output, names: &[&str], out: Option<&Path>) {
    let err = stderr(o);
    assert!(
        matches!(code(o), Some(1..=3)),
        "exit {:?}, stderr:\n{err}",
        o.status
    );
    for bad in ["panicked", "RUST_BACKTRACE", "stack backtrace"] {
        assert!(!err.contains(bad), "panic text `{bad}`:\n{err}");
    }
    assert!(err.starts_with("error: "), "{err}");
    for n in names {
        assert!(err.contains(n), "message does not name `{n}`:\n{err}");
    }
    if let Some(out) = out {
        for f in ["stack.tif", "stack.json", "preview.png"] {
            assert!(!out.join(f).exists(), "{f} left in {}", out.display());
        }
    }
}

/// A small UTM DSM (`w` x `h` cells of `cell` m) in `dir`.
fn dsm(dir: &Path, name: &str, w: usize, h: usize, cell: f64) -> PathBuf {
    let g = utm_grid(w, h, cell);
    let path = dir.join(name);
    write_dsm(&path, &g, &surface(&g));
    path
}

/// A classic little-endian GeoTIFF, band-interleaved tiles of unsigned 8-bit samples in
/// EPSG:32633, written by hand (TIFF 6.0 §2, §15; OGC GeoTIFF 1.1) so that it can
/// declare any size: `blocks` gives each tile's (offset, byte count), (0, 0) = sparse.
/// `data` is appended after the directory and `data_at` returns where it starts.
fn tiff(
    size: (u32, u32),
    tile: u32,
    cell: f64,
    blocks: impl Fn(u32) -> (u32, u32),
    data: &[u8],
) -> Vec<u8> {
    let (w, h) = size;
    let n = w.div_ceil(tile) * h.div_ceil(tile);
    let geokeys: [u16; 16] = [1, 1, 0, 3, 1024, 0, 1, 1, 1025, 0, 1, 1, 3072, 0, 1, 32633];
    // (tag, type, count, value bytes); type 3 SHORT, 4 LONG, 12 DOUBLE.
    let mut entries: Vec<(u16, u16, u32, Vec<u8>)> = Vec::new();
    let long = |v: u32| v.to_le_bytes().to_vec();
    let short = |v: u16| v.to_le_bytes().to_vec();
    entries.push((256, 4, 1, long(w)));
    entries.push((257, 4, 1, long(h)));
    entries.push((258, 3, 1, short(8)));
    entries.push((259, 3, 1, short(1)));
    entries.push((262, 3, 1, short(1)));
    entries.push((277, 3, 1, short(1)));
    entries.push((322, 4, 1, long(tile)));
    entries.push((323, 4, 1, long(tile)));
    let offsets_at = entries.len();
    entries.push((324, 4, n, Vec::new()));
    entries.push((
        325,
        4,
        n,
        (0..n).flat_map(|i| blocks(i).1.to_le_bytes()).collect(),
    ));
    entries.push((339, 3, 1, short(1)));
    let doubles = |v: &[f64]| v.iter().flat_map(|d| d.to_le_bytes()).collect::<Vec<u8>>();
    entries.push((33550, 12, 3, doubles(&[cell, cell, 0.0])));
    entries.push((
        33922,
        12,
        6,
        doubles(&[0.0, 0.0, 0.0, 500_000.0, 5_000_000.0, 0.0]),
    ));
    entries.push((
        34735,
        3,
        16,
        geokeys.iter().flat_map(|k| k.to_le_bytes()).collect(),
    ));
    let ifd_len = 2 + 12 * entries.len() + 4;
    let mut extra_at = 8 + ifd_len;
    // Lay out the out-of-line values; the offsets array is filled once `data` has a place.
    let mut places = Vec::new();
    for (i, (_, _, count, bytes)) in entries.iter().enumerate() {
        let len = if i == offsets_at {
            4 * *count as usize
        } else {
            bytes.len()
        };
        if len > 4 {
            places.push(Some(extra_at));
            extra_at += len + len % 2;
        } else {
            places.push(None);
        }
    }
    let data_at = extra_at as u32;
    entries[offsets_at].3 = (0..n)
        .flat_map(|i| {
            let (o, c) = blocks(i);
            let o = if o == 0 && c == 0 { 0 } else { data_at + o };
            o.to_le_bytes()
        })
        .collect();
    let mut out = b"II*\0".to_vec();
    out.extend_from_slice(&8u32.to_le_bytes());
    out.extend_from_slice(&(entries.len() as u16).to_le_bytes());
    for ((tag, typ, count, bytes), place) in entries.iter().zip(&places) {
        out.extend_from_slice(&tag.to_le_bytes());
        out.extend_from_slice(&typ.to_le_bytes());
        out.extend_from_slice(&count.to_le_bytes());
        match place {
            Some(at) => out.extend_from_slice(&(*at as u32).to_le_bytes()),
            None => {
                let mut v = bytes.clone();
                v.resize(4, 0);
                out.extend_from_slice(&v);
            }
        }
    }
    out.extend_from_slice(&0u32.to_le_bytes());
    for ((_, _, _, bytes), place) in entries.iter().zip(&places) {
        if place.is_some() {
            out.extend_from_slice(bytes);
            if bytes.len() % 2 == 1 {
                out.push(0);
            }
        }
    }
    assert_eq!(out.len(), data_at as usize);
    out.extend_from_slice(data);
    out
}

#[test]
fn window_radius_past_the_raster() {
    let tmp = tempdir();
    let d = dsm(tmp.path(), "dsm.tif", 40, 30, 0.5);
    let out = tmp.path().join("out");
    for args in [
        vec!["--scales", "1e19"],
        vec!["--features", "tpi@1e300"],
        vec!["--features", "slope,roughness", "--scales", "1,50"],
    ] {
        let mut all = vec!["build", "--dsm", d.to_str().unwrap(), "--out"];
        all.push(out.to_str().unwrap());
        all.extend(args.iter().copied());
        let o = run(&all);
        assert_eq!(code(&o), Some(2), "{args:?}: {}", stderr(&o));
        assert_clean_failure(
            &o,
            &["larger than the raster (40 x 30 cells)", "--scales"],
            Some(&out),
        );
    }
    // The largest radius the message offers is accepted: (40 − 1) / 2 = 19 cells = 9.5 m.
    let o = run(&[
        "build",
        "--dsm",
        d.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "-q",
        "--features",
        "tpi@9.5",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn ground_settings_out_of_range() {
    let tmp = tempdir();
    let d = dsm(tmp.path(), "dsm.tif", 40, 30, 0.5);
    let out = tmp.path().join("out");
    for (args, names) in [
        (
            vec!["--ground-max-object=-5"],
            vec!["largest object width", "--ground-"],
        ),
        (vec!["--ground-window", "hexagon"], vec!["--ground-window"]),
        (vec!["--ground-ndvi-max", "3"], vec!["NDVI threshold"]),
        (vec!["--ground-ndvi"], vec!["`red`", "--bands"]),
    ] {
        let mut all = vec!["build", "--dsm", d.to_str().unwrap(), "--out"];
        all.push(out.to_str().unwrap());
        all.extend(["--features", "dtm,height"]);
        all.extend(args.iter().copied());
        let o = run(&all);
        assert_eq!(code(&o), Some(2), "{args:?}: {}", stderr(&o));
        assert_clean_failure(&o, &names, Some(&out));
    }
    // A largest object far past the raster is no refusal: the filter's context is capped
    // at the raster's side, and the whole raster is the block.
    let o = run(&[
        "build",
        "--dsm",
        d.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "-q",
        "--features",
        "height",
        "--ground-max-object",
        "1e300",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn cell_of_1e_minus_300_metres() {
    let tmp = tempdir();
    let path = tmp.path().join("tiny_cells.tif");
    // 32 x 32 cells of 1e-300 m, all sparse tiles (nodata 0 reads as 0).
    std::fs::write(&path, tiff((32, 32), 16, 1e-300, |_| (0, 0), &[])).unwrap();
    let out = tmp.path().join("out");
    let o = run(&[
        "build",
        "--dsm",
        path.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_clean_failure(&o, &["larger than the raster", "--resolution"], Some(&out));
}

#[test]
fn grid_past_the_cell_limit_and_threads_past_the_cap() {
    let tmp = tempdir();
    // A 20 m x 15 m site at 0.1 m.
    let d = dsm(tmp.path(), "dsm.tif", 200, 150, 0.1);
    let out = tmp.path().join("out");
    let base = [
        "build",
        "--dsm",
        d.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    // 1e-5 m: 2,000,000 x 1,500,000 cells, within the per-side limit, past the cell limit.
    let o = run(&[&base[..], &["--resolution", "1e-5"]].concat());
    assert_clean_failure(
        &o,
        &["2000000 x 1500000", "--cell-limit", "--resolution"],
        Some(&out),
    );
    // 1e-7 m: past the per-side limit.
    let o = run(&[&base[..], &["--resolution", "1e-7"]].concat());
    assert_clean_failure(&o, &["--resolution 0.0000001 m", "per side"], Some(&out));
    let o = run(&[&base[..], &["--threads", "100000"]].concat());
    assert_clean_failure(&o, &["--threads 100000", "1..=1024"], Some(&out));
    let o = run(&[&base[..], &["--cell-limit=-3"]].concat());
    assert_clean_failure(&o, &["--cell-limit"], Some(&out));
    // A lower limit refuses the DSM's own grid, and names the figure to pass.
    let o = run(&[&base[..], &["--cell-limit", "1000"]].concat());
    assert_clean_failure(
        &o,
        &["200 x 150 = 30000 cells", "--cell-limit 30000"],
        Some(&out),
    );
}

#[test]
fn declared_size_far_past_the_budget() {
    let tmp = tempdir();
    // 4194304² cells in 8192² tiles, every tile sparse: a 2 MiB file.
    let path = tmp.path().join("huge.tif");
    std::fs::write(&path, tiff((1 << 22, 1 << 22), 8192, 0.1, |_| (0, 0), &[])).unwrap();
    let out = tmp.path().join("out");
    let base = [
        "build",
        "--dsm",
        path.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    let o = run(&[&base[..], &["--features", "slope"]].concat());
    assert_clean_failure(&o, &["4194304 x 4194304", "--cell-limit"], Some(&out));
    // Past the cell limit on purpose: the writer's tile index alone is over the budget.
    let o = run(&[
        &base[..],
        &[
            "--features",
            "slope",
            "--cell-limit",
            "1e14",
            "--memory",
            "1G",
        ],
    ]
    .concat());
    assert_clean_failure(&o, &["--memory", "tile index", "MiB"], Some(&out));
}

#[test]
fn deep_band_math() {
    let tmp = tempdir();
    let d = dsm(tmp.path(), "dsm.tif", 20, 20, 0.5);
    let out = tmp.path().join("out");
    let deep = format!("{}1{}", "(".repeat(1800), ")".repeat(1800));
    let o = run(&[
        "build",
        "--dsm",
        d.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--features",
        "slope",
        "--index",
        &format!("deep={deep}"),
    ]);
    assert_clean_failure(&o, &["expression `deep`", "--index"], Some(&out));
    // From a recipe: 900 levels, under the length limit, past the nesting limit.
    let deep = format!("{}1{}", "(".repeat(900), ")".repeat(900));
    let recipe = tmp.path().join("deep.toml");
    std::fs::write(
        &recipe,
        format!(
            "[inputs]\ndsm = \"dsm.tif\"\n[features]\nlist = [\"slope\"]\nexpressions = {{ deep = \"{deep}\" }}\n"
        ),
    )
    .unwrap();
    let o = run(&[
        "build",
        "--recipe",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_clean_failure(
        &o,
        &["expression `deep`", "nests deeper than 64"],
        Some(&out),
    );
}

#[test]
fn closed_pipe_ends_quietly() {
    use std::process::Stdio;
    for args in [vec!["features"], vec!["features", "--json"], vec!["--help"]] {
        let mut child = util::command()
            .args(&args)
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        // Close the pipe before the first line is written, as `| head -0` does (the
        // output is smaller than a pipe's buffer: closing it later would not be seen).
        drop(child.stdout.take());
        let o = child.wait_with_output().unwrap();
        let err = stderr(&o);
        #[cfg(unix)]
        {
            use std::os::unix::process::ExitStatusExt;
            // Killed by SIGPIPE (13), as other Unix tools, or done before the pipe closed.
            assert!(
                o.status.signal() == Some(13) || o.status.code() == Some(0),
                "{args:?}: {:?}",
                o.status
            );
        }
        assert!(err.is_empty(), "{args:?}: {err}");
    }
}

#[test]
fn block_size_too_small_for_the_stack() {
    let tmp = tempdir();
    let d = dsm(tmp.path(), "dsm.tif", 40, 40, 0.5);
    let stack = tmp.path().join("stack");
    let o = run(&[
        "build",
        "--dsm",
        d.to_str().unwrap(),
        "--out",
        stack.to_str().unwrap(),
        "-q",
        "--features",
        "slope",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let samples = tmp.path().join("s.csv");
    let mut text = String::from("x,y,class\n");
    for i in 0..12 {
        let (x, y) = (500_001.0 + i as f64 * 1.5, 4_999_990.0 - i as f64);
        text += &format!("{x},{y},{}\n", ["a", "b"][i % 2]);
    }
    std::fs::write(&samples, text).unwrap();
    let table = tmp.path().join("t.csv");
    let o = run(&[
        "sample",
        "--stack",
        stack.to_str().unwrap(),
        "--samples",
        samples.to_str().unwrap(),
        "--out",
        table.to_str().unwrap(),
        "--folds",
        "2",
        "--block-size",
        "1e-300",
    ]);
    assert_clean_failure(
        &o,
        &["--block-size 1e-300 m is smaller than one cell"],
        None,
    );
    assert!(!table.exists());
}

#[test]
fn system_errors_in_plain_words() {
    let tmp = tempdir();
    let missing = p(tmp.path(), "nope.tif");
    let out = tmp.path().join("out");
    let o = run(&["build", "--dsm", &missing, "--out", out.to_str().unwrap()]);
    assert_clean_failure(
        &o,
        &[&missing, "no such file or folder", "fix:"],
        Some(&out),
    );
    assert!(!stderr(&o).contains("entity not found"));
    let o = run(&["info", &missing]);
    assert_clean_failure(&o, &[&missing, "no such file or folder"], None);
    // A folder given as the DSM.
    let folder = tmp.path().join("a_folder");
    std::fs::create_dir(&folder).unwrap();
    let o = run(&[
        "build",
        "--dsm",
        folder.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_clean_failure(&o, &[folder.to_str().unwrap(), "folder"], Some(&out));
    assert!(!stderr(&o).contains("Is a directory"), "{}", stderr(&o));
}

#[test]
fn truncated_tiles_reported_by_info_and_build() {
    let tmp = tempdir();
    // 64 x 64 cells in 16 tiles of 16², the directory first: cutting the file short keeps
    // the directory and loses tiles.
    let data: Vec<u8> = (0..16 * 256).map(|i| (i % 251) as u8).collect();
    let bytes = tiff((64, 64), 16, 0.5, |i| (i * 256, 256), &data);
    let sound = tmp.path().join("sound.tif");
    std::fs::write(&sound, &bytes).unwrap();
    let o = run(&["info", sound.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!String::from_utf8_lossy(&o.stdout).contains("TRUNCATED"));
    let cut = tmp.path().join("cut.tif");
    std::fs::write(&cut, &bytes[..bytes.len() - 5 * 256 - 100]).unwrap();
    let o = run(&["info", cut.to_str().unwrap()]);
    assert_clean_failure(
        &o,
        &[
            cut.to_str().unwrap(),
            "6 of its 16 tiles lie past the end",
            "truncated",
        ],
        None,
    );
    assert!(String::from_utf8_lossy(&o.stdout).contains("TRUNCATED: 6 of 16 tiles"));
    let o = run(&["info", "--json", cut.to_str().unwrap()]);
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["truncated"]["blocks_past_end"], 6);
    let out = tmp.path().join("out");
    let o = run(&[
        "build",
        "--dsm",
        cut.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--features",
        "slope",
    ]);
    assert_clean_failure(&o, &[cut.to_str().unwrap(), "truncated"], Some(&out));
}

/// The fuzz target's seed corpus (fuzz/corpus/reader) and files that once troubled the
/// reader: `info` and `build` over each end with a clean status and no panic.
#[test]
fn reader_fuzz_corpus_never_panics() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/corpus/reader");
    let tmp = tempdir();
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    files.sort();
    assert!(files.len() >= 6, "seed corpus missing: {}", dir.display());
    // Damaged variants of every seed: cut in half, and with the header's IFD offset broken.
    for f in files.clone() {
        let bytes = std::fs::read(&f).unwrap();
        let name = f.file_name().unwrap().to_string_lossy().into_owned();
        let half = tmp.path().join(format!("half_{name}"));
        std::fs::write(&half, &bytes[..bytes.len() / 2]).unwrap();
        let mut bad = bytes.clone();
        if bad.len() > 8 {
            bad[4..8].copy_from_slice(&u32::MAX.to_le_bytes());
        }
        let broken = tmp.path().join(format!("ifd_{name}"));
        std::fs::write(&broken, &bad).unwrap();
        files.push(half);
        files.push(broken);
    }
    for f in &files {
        let fs = f.to_str().unwrap();
        for args in [
            vec!["info", fs],
            vec!["info", "--json", fs],
            vec![
                "build",
                "--dsm",
                fs,
                "--out",
                &p(tmp.path(), "out"),
                "--features",
                "slope,tpi@1",
                "-q",
                "--force",
            ],
        ] {
            let o = run(&args);
            let err = stderr(&o);
            assert!(
                matches!(code(&o), Some(0..=3)),
                "{args:?}: {:?}\n{err}",
                o.status
            );
            assert!(
                !err.contains("panicked") && !err.contains("RUST_BACKTRACE"),
                "{args:?}: {err}"
            );
            if !o.status.success() {
                assert!(err.contains(fs) || err.contains("--"), "{args:?}: {err}");
            }
        }
    }
}
