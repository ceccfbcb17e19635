//! Land cover of the demo site: six classes, where each lies, and how tall its
//! vegetation stands in each season.
//!
//! The class of a point is decided in a fixed order: channel zones (water, gravel bar),
//! then the farm track, then the willow patches, then wet meadow on the low floodplain
//! near the river and dry meadow everywhere else (terraces, the far floodplain).
//! Everything here is invented for the demo.

use serde::Serialize;

use super::noise::fbm;
use super::terrain::{self, ChannelZone};

/// A land-cover class of the demo site.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum CoverClass {
    OpenWater,
    GravelBar,
    WetMeadow,
    DryMeadow,
    WillowScrub,
    FarmTrack,
}

impl CoverClass {
    /// Every class, in code order.
    pub const ALL: [CoverClass; 6] = [
        CoverClass::OpenWater,
        CoverClass::GravelBar,
        CoverClass::WetMeadow,
        CoverClass::DryMeadow,
        CoverClass::WillowScrub,
        CoverClass::FarmTrack,
    ];

    /// Lower-case name used in `samples.csv` and `site.json`.
    pub fn name(self) -> &'static str {
        match self {
            CoverClass::OpenWater => "open_water",
            CoverClass::GravelBar => "gravel_bar",
            CoverClass::WetMeadow => "wet_meadow",
            CoverClass::DryMeadow => "dry_meadow",
            CoverClass::WillowScrub => "willow_scrub",
            CoverClass::FarmTrack => "farm_track",
        }
    }

    /// One-sentence description for `site.json` and the README.
    pub fn description(self) -> &'static str {
        match self {
            CoverClass::OpenWater => {
                "the river's water surface, about 0.65 m below the banks; photogrammetric matching fails in places"
            }
            CoverClass::GravelBar => {
                "bare gravel exposed on the inside of the southern bend, 0.05-0.5 m above the water"
            }
            CoverClass::WetMeadow => {
                "tall moist grassland on the low floodplain and banks within about ten metres of the river"
            }
            CoverClass::DryMeadow => {
                "shorter grassland on the two terraces and the far floodplain, mown in late summer"
            }
            CoverClass::WillowScrub => {
                "willow patches with a 2-4 m canopy over wet meadow, seen through gaps; in leaf in summer and thinning by autumn"
            }
            CoverClass::FarmTrack => {
                "a farm track on the lower terrace surfaced with gravel from the bar: bare, smooth, raised about 0.15 m"
            }
        }
    }

    /// Small integer code (1-based, 0 is left for "no class") used in class maps.
    pub fn code(self) -> u8 {
        self as u8 + 1
    }

    /// The class with [`CoverClass::code`] `code`.
    pub fn from_code(code: u8) -> Option<CoverClass> {
        CoverClass::ALL
            .get((code as usize).checked_sub(1)?)
            .copied()
    }
}

/// A season of flying.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Season {
    Spring,
    Summer,
    Autumn,
}

/// One willow patch: centre (u, v) in local metres, radius in metres, summer canopy
/// height in metres.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WillowPatch {
    pub u: f64,
    pub v: f64,
    pub radius: f64,
    pub height: f64,
}

/// The willow patches: along both banks, one on the far floodplain and one on the
/// upper terrace.
pub fn willow_patches() -> [WillowPatch; 6] {
    let bank = |u: f64, side: f64, off: f64| terrain::channel_centre_v(u) + side * off;
    [
        WillowPatch {
            u: 8.0,
            v: bank(8.0, -1.0, 8.5),
            radius: 3.8,
            height: 3.1,
        },
        WillowPatch {
            u: 30.0,
            v: bank(30.0, 1.0, 7.8),
            radius: 3.2,
            height: 2.8,
        },
        WillowPatch {
            u: 62.0,
            v: bank(62.0, -1.0, 9.0),
            radius: 4.6,
            height: 3.8,
        },
        WillowPatch {
            u: 73.0,
            v: bank(73.0, 1.0, 7.5),
            radius: 3.4,
            height: 3.3,
        },
        WillowPatch {
            u: 43.0,
            v: 5.5,
            radius: 3.9,
            height: 2.9,
        },
        WillowPatch {
            u: 21.0,
            v: 57.5,
            radius: 3.0,
            height: 3.6,
        },
    ]
}

/// Normalised distance from a willow patch centre: below 1 inside its ragged outline.
fn willow_reach(p: &WillowPatch, u: f64, v: f64) -> f64 {
    let d = ((u - p.u).powi(2) + (v - p.v).powi(2)).sqrt();
    d / p.radius + 0.15 * fbm(u, v, 1.5, 2, 0x5A11)
}

/// The nearest willow patch whose outline contains (u, v), with the normalised distance.
fn willow_at(u: f64, v: f64) -> Option<(WillowPatch, f64)> {
    willow_patches()
        .into_iter()
        .map(|p| (p, willow_reach(&p, u, v)))
        .filter(|(_, r)| *r < 1.0)
        .min_by(|a, b| a.1.total_cmp(&b.1))
}

/// Distance beyond the top of the nearer bank within which the floodplain is wet meadow,
/// metres (before the ragged ±1.5 m boundary noise).
pub const WET_REACH: f64 = 10.0;

/// Width of the transition between wet and dry meadow, metres: within half of it on
/// either side of the class boundary the sward is a mixture of both.
pub const MEADOW_ECOTONE_M: f64 = 6.0;

/// Share of wet-meadow sward at local (u, v) on the meadows, 0 to 1: 0.5 on the boundary
/// between the classes (so above 0.5 exactly where [`class_at`] says wet meadow, on
/// meadow ground), falling linearly to 0 at [`MEADOW_ECOTONE_M`]/2 beyond it and rising to
/// 1 as far inside; 0 on the terraces.
pub fn wet_fraction(u: f64, v: f64) -> f64 {
    let below_terrace = v < terrain::scarp_v(0, u) - terrain::SCARP_HALF_WIDTH[0];
    if !below_terrace {
        return 0.0;
    }
    let n = terrain::across_channel(u, v).abs();
    let reach = WET_REACH + 1.5 * fbm(u, v, 6.0, 2, 0x3E7);
    let beyond = n - (terrain::CHANNEL_HALF_WIDTH + terrain::BANK_WIDTH + reach);
    (0.5 - beyond / MEADOW_ECOTONE_M).clamp(0.0, 1.0)
}

/// The cover class at local (u, v).
pub fn class_at(u: f64, v: f64) -> CoverClass {
    let (_, zone) = terrain::ground(u, v);
    match zone {
        ChannelZone::Water => return CoverClass::OpenWater,
        ChannelZone::Bar => return CoverClass::GravelBar,
        ChannelZone::Land => {}
    }
    if terrain::track_distance(u, v) < terrain::TRACK_HALF_WIDTH {
        return CoverClass::FarmTrack;
    }
    if willow_at(u, v).is_some() {
        return CoverClass::WillowScrub;
    }
    let n = terrain::across_channel(u, v).abs();
    let reach = WET_REACH + 1.5 * fbm(u, v, 6.0, 2, 0x3E7);
    let below_terrace = v < terrain::scarp_v(0, u) - terrain::SCARP_HALF_WIDTH[0];
    if below_terrace && n < terrain::CHANNEL_HALF_WIDTH + terrain::BANK_WIDTH + reach {
        CoverClass::WetMeadow
    } else {
        CoverClass::DryMeadow
    }
}

/// Height of the vegetation surface above the ground at local (u, v) in `season`, metres,
/// given the point's class: meadow sward heights with patchy growth, and willow domes
/// (a spherical cap of the patch's height, lower in spring and autumn, with a bumpy
/// crown). Water, gravel and track carry none.
pub fn vegetation_height(u: f64, v: f64, class: CoverClass, season: Season) -> f64 {
    let patchy = 1.0 + 0.35 * fbm(u, v, 2.0, 3, 0x6A55);
    match class {
        CoverClass::OpenWater | CoverClass::GravelBar | CoverClass::FarmTrack => 0.0,
        CoverClass::WetMeadow => {
            patchy
                * match season {
                    Season::Spring => 0.10,
                    Season::Summer => 0.45,
                    Season::Autumn => 0.30,
                }
        }
        CoverClass::DryMeadow => {
            patchy
                * match season {
                    Season::Spring => 0.08,
                    Season::Summer => 0.28,
                    Season::Autumn => 0.10,
                }
        }
        CoverClass::WillowScrub => {
            let Some((p, reach)) = willow_at(u, v) else {
                return 0.0;
            };
            let leaf = match season {
                Season::Spring => 0.82,
                Season::Summer => 1.0,
                Season::Autumn => 0.9,
            };
            let cap = (1.0 - reach * reach).max(0.0).sqrt();
            let crown = 0.15 * fbm(u, v, 1.2, 3, 0xC70);
            (p.height * leaf * (0.55 + 0.45 * cap) + crown).max(0.3)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_round_trip_and_names_are_lower_case() {
        for c in CoverClass::ALL {
            assert_eq!(CoverClass::from_code(c.code()), Some(c));
            assert!(c
                .name()
                .chars()
                .all(|ch| ch.is_ascii_lowercase() || ch == '_'));
        }
        assert_eq!(CoverClass::from_code(0), None);
        assert_eq!(CoverClass::from_code(7), None);
    }

    #[test]
    fn landmarks_have_their_classes() {
        let vc = terrain::channel_centre_v(20.0);
        assert_eq!(class_at(20.0, vc), CoverClass::OpenWater);
        assert_eq!(class_at(20.0, vc + 6.0), CoverClass::WetMeadow);
        assert_eq!(
            class_at(40.0, terrain::track_centre_v(40.0)),
            CoverClass::FarmTrack
        );
        let p = willow_patches()[2];
        assert_eq!(class_at(p.u, p.v), CoverClass::WillowScrub);
        assert_eq!(class_at(70.0, 58.0), CoverClass::DryMeadow);
        let vb = terrain::channel_centre_v(terrain::BAR_CENTRE_U) + 1.0;
        assert_eq!(class_at(terrain::BAR_CENTRE_U, vb), CoverClass::GravelBar);
    }

    #[test]
    fn wet_fraction_above_half_exactly_on_wet_meadow() {
        // The meadow mixture is built around the class boundary: on meadow ground, more
        // than half wet sward where the class is wet meadow, at most half where dry.
        let mut mixed = 0;
        for i in 0..160 {
            for j in 0..120 {
                let (u, v) = (i as f64 * 0.5 + 0.25, j as f64 * 0.5 + 0.25);
                let f = wet_fraction(u, v);
                match class_at(u, v) {
                    CoverClass::WetMeadow => assert!(f > 0.5, "({u}, {v}): {f}"),
                    CoverClass::DryMeadow => assert!(f <= 0.5, "({u}, {v}): {f}"),
                    _ => continue,
                }
                if f > 0.0 && f < 1.0 {
                    mixed += 1;
                }
            }
        }
        // A 6 m transition zone along ~2 x 80 m of boundary: a few thousand of the
        // 19 200 points are mixed.
        assert!(mixed > 1000, "{mixed}");
    }

    #[test]
    fn willow_canopy_two_to_four_metres() {
        // The brief for the demo: willow canopy 2-4 m above ground in the DSM.
        for p in willow_patches() {
            for season in [Season::Spring, Season::Summer, Season::Autumn] {
                let h = vegetation_height(p.u, p.v, CoverClass::WillowScrub, season);
                assert!((2.0..=4.0).contains(&h), "patch at {},{}: {h} m", p.u, p.v);
            }
        }
    }
}
