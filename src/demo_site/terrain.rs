//! The invented bare-earth landforms of the demo site, as closed-form functions of local
//! coordinates (u east, v north, metres from the site's south-west corner).
//!
//! A river meanders west to east across a floodplain that falls gently downstream. The
//! water surface lies below the banks; a gravel bar fills the inside of the southern
//! bend; two terraces rise to the north behind scarps; a farm track runs along the lower
//! terrace. Small-scale roughness is added from [`super::noise::fbm`]. All of it is
//! invented for the demo; heights are in metres above an invented datum.

use std::f64::consts::TAU;

use super::noise::fbm;

/// Floodplain elevation at the western edge, metres.
pub const BASE_ELEVATION: f64 = 211.80;
/// Downstream (eastward) fall of the valley floor, metres per metre.
pub const VALLEY_FALL: f64 = 0.004;
/// Wetted half-width of the channel, metres.
pub const CHANNEL_HALF_WIDTH: f64 = 3.0;
/// Horizontal width of each bank, from the water's edge to the floodplain, metres.
pub const BANK_WIDTH: f64 = 1.2;
/// Depth of the water surface below the floodplain at the channel, metres.
pub const WATER_DROP: f64 = 0.65;
/// Rise of the lower and upper terrace scarps, metres.
pub const SCARP_RISE: [f64; 2] = [0.9, 1.3];
/// Half-widths of the scarps' tanh steps, metres.
pub const SCARP_HALF_WIDTH: [f64; 2] = [0.7, 0.9];
/// Along-channel position of the gravel bar's middle, metres east of the site corner.
pub const BAR_CENTRE_U: f64 = 50.0;
/// Half-length of the gravel bar along the channel, metres.
pub const BAR_HALF_LENGTH: f64 = 13.0;
/// Greatest width of the exposed bar, metres.
pub const BAR_MAX_WIDTH: f64 = 4.5;
/// Half-width of the farm track's running surface, metres.
pub const TRACK_HALF_WIDTH: f64 = 1.7;
/// Height of the track's raised bed above the surrounding ground, metres.
pub const TRACK_RISE: f64 = 0.15;

/// Northing of the channel centreline at easting `u` (local metres).
pub fn channel_centre_v(u: f64) -> f64 {
    23.0 + 7.0 * (TAU * (u - 5.0) / 60.0).sin() + 0.8 * (TAU * u / 17.0 + 1.0).sin()
}

/// d v / d u of the channel centreline.
fn channel_centre_dv(u: f64) -> f64 {
    7.0 * TAU / 60.0 * (TAU * (u - 5.0) / 60.0).cos()
        + 0.8 * TAU / 17.0 * (TAU * u / 17.0 + 1.0).cos()
}

/// Signed distance across the channel from its centreline, metres, positive to the north
/// (the vertical offset projected onto the centreline's normal).
pub fn across_channel(u: f64, v: f64) -> f64 {
    let d = channel_centre_dv(u);
    (v - channel_centre_v(u)) / (1.0 + d * d).sqrt()
}

/// Northing of the lower (k = 0) and upper (k = 1) terrace scarps' mid-lines at `u`.
pub fn scarp_v(k: usize, u: f64) -> f64 {
    match k {
        0 => 41.0 + 1.2 * (TAU * u / 45.0 + 0.3).sin(),
        _ => 53.5 + 0.8 * (TAU * u / 38.0 + 2.0).sin(),
    }
}

/// Northing of the farm track's centreline at `u`.
pub fn track_centre_v(u: f64) -> f64 {
    47.3 + 1.0 * (TAU * u / 70.0).sin()
}

/// Distance from the farm track's centreline, metres (measured north-south; the track
/// runs nearly east-west).
pub fn track_distance(u: f64, v: f64) -> f64 {
    (v - track_centre_v(u)).abs()
}

/// Water surface elevation at `u`, metres: flat across the channel, falling downstream.
pub fn water_level(u: f64) -> f64 {
    BASE_ELEVATION - VALLEY_FALL * u - WATER_DROP
}

/// Exposed width of the gravel bar at `u`, metres (0 outside the bar).
pub fn bar_width(u: f64) -> f64 {
    let t = (u - BAR_CENTRE_U) / BAR_HALF_LENGTH;
    if t.abs() >= 1.0 {
        0.0
    } else {
        BAR_MAX_WIDTH * (1.0 - t * t)
    }
}

fn smoothstep(t: f64) -> f64 {
    let t = t.clamp(0.0, 1.0);
    t * t * (3.0 - 2.0 * t)
}

/// The dry ground surface away from the channel: valley fall, a gentle rise to the south
/// and the two terrace steps (tanh steps of height [`SCARP_RISE`]).
pub fn valley_surface(u: f64, v: f64) -> f64 {
    let n = across_channel(u, v);
    let mut z = BASE_ELEVATION - VALLEY_FALL * u;
    // The floodplain climbs away from the river on both sides.
    let out = (n.abs() - CHANNEL_HALF_WIDTH - BANK_WIDTH).max(0.0);
    z += if n < 0.0 {
        0.012 * (out - 8.0).max(0.0) + 0.006 * out
    } else {
        0.008 * out
    };
    for k in 0..2 {
        let t = (v - scarp_v(k, u)) / SCARP_HALF_WIDTH[k];
        z += SCARP_RISE[k] * 0.5 * (1.0 + t.tanh());
    }
    z
}

/// Where a point lies with respect to the channel.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ChannelZone {
    /// Under the water surface.
    Water,
    /// On the exposed gravel bar.
    Bar,
    /// On a bank or beyond it.
    Land,
}

/// Bare-earth elevation (metres) and channel zone at (`u`, `v`), without roughness.
/// Over water the surface is the water surface, which is what a photogrammetric DSM sees.
pub fn ground(u: f64, v: f64) -> (f64, ChannelZone) {
    let n = across_channel(u, v);
    let w = water_level(u);
    let dry = valley_surface(u, v);
    let a = n.abs();
    let bank = if a <= CHANNEL_HALF_WIDTH {
        w
    } else {
        w + (dry - w) * smoothstep((a - CHANNEL_HALF_WIDTH) / BANK_WIDTH)
    };
    // The bar lies on the inside of the southern bend, i.e. on the channel's north side.
    let bw = bar_width(u);
    if n > 0.0 && bw > 0.0 {
        let edge = CHANNEL_HALF_WIDTH - bw;
        let top = CHANNEL_HALF_WIDTH + BANK_WIDTH;
        if n >= edge && n <= top {
            let bar = w + 0.06 + 0.45 * (n - edge) / (top - edge);
            if bar >= bank {
                return (bar, ChannelZone::Bar);
            }
        }
    }
    if a < CHANNEL_HALF_WIDTH {
        (w, ChannelZone::Water)
    } else {
        (bank, ChannelZone::Land)
    }
}

/// Bare-earth roughness, metres: fBm with 3 m base wavelength and ±3 cm amplitude, coarser
/// cobbles on the bar; none on water. The track's raised bed is added here as well
/// (smooth, [`TRACK_RISE`] high, shoulders 0.6 m wide).
pub fn micro_relief(u: f64, v: f64, zone: ChannelZone) -> f64 {
    match zone {
        ChannelZone::Water => 0.0,
        ChannelZone::Bar => 0.03 * fbm(u, v, 0.4, 3, 0xBA5),
        ChannelZone::Land => {
            let d = track_distance(u, v);
            let bed = smoothstep((TRACK_HALF_WIDTH + 0.3 - d) / 0.6);
            let rough = 0.03 * fbm(u, v, 3.0, 4, 0x6E0);
            TRACK_RISE * bed + (1.0 - bed) * rough
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn water_below_banks() {
        // Across the channel at u = 20 (a northern bend): the water surface is
        // WATER_DROP below the floodplain at the bank tops.
        let u = 20.0;
        let vc = channel_centre_v(u);
        let (zw, zone) = ground(u, vc);
        assert_eq!(zone, ChannelZone::Water);
        assert!((zw - water_level(u)).abs() < 1e-12);
        let (zn, zone_n) = ground(u, vc + 6.0);
        let (zs, zone_s) = ground(u, vc - 6.0);
        assert_eq!((zone_n, zone_s), (ChannelZone::Land, ChannelZone::Land));
        assert!(zn - zw > 0.6 && zs - zw > 0.6, "banks {zn} {zs} water {zw}");
    }

    #[test]
    fn bar_inside_southern_bend() {
        // The centreline's southern bend lies near u = 50; the bar is on its north side.
        let vc = channel_centre_v(BAR_CENTRE_U);
        assert!(vc < channel_centre_v(35.0) && vc < channel_centre_v(65.0));
        let (z, zone) = ground(BAR_CENTRE_U, vc + 1.0);
        assert_eq!(zone, ChannelZone::Bar);
        let w = water_level(BAR_CENTRE_U);
        assert!(z > w && z < w + 0.55);
        assert_eq!(ground(BAR_CENTRE_U, vc - 2.0).1, ChannelZone::Water);
    }

    #[test]
    fn terraces_step_up_north() {
        // Closed form: far from both scarps the steps add their full rises.
        let u = 10.0;
        let below = valley_surface(u, scarp_v(0, u) - 4.0);
        let middle = valley_surface(u, scarp_v(0, u) + 4.0);
        let above = valley_surface(u, scarp_v(1, u) + 4.0);
        assert!((middle - below - SCARP_RISE[0]).abs() < 0.1);
        assert!((above - middle - SCARP_RISE[1]).abs() < 0.15);
        // Steepest part of a tanh step: rise / (2 · half-width) (derivative of tanh at 0).
        let k = 0;
        let h = 1e-4;
        let v0 = scarp_v(k, u);
        let slope = (valley_surface(u, v0 + h) - valley_surface(u, v0 - h)) / (2.0 * h);
        let expected = SCARP_RISE[k] / (2.0 * SCARP_HALF_WIDTH[k]);
        assert!((slope - expected).abs() < 0.02, "{slope} vs {expected}");
    }

    #[test]
    fn track_raised_and_smooth() {
        let u = 30.0;
        let v = track_centre_v(u);
        let a = micro_relief(u, v, ChannelZone::Land);
        let b = micro_relief(u + 0.37, v + 0.2, ChannelZone::Land);
        assert_eq!(a, TRACK_RISE);
        assert_eq!(b, TRACK_RISE);
    }
}
