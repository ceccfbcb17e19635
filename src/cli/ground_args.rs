//! The `--ground-*` flags of `terrastack build`: settings of the ground filter behind the
//! `dtm`, `height`, `ground`, `ground_distance` and `WORD@dtm` features (docs/methods.md,
//! *Ground from the DSM*).

use terrastack::ground::settings::GroundSection;

#[derive(clap::Args, Debug, Default)]
pub struct GroundArgs {
    /// Ground filter: width in metres of the widest object (tree crown, building, shrub
    /// patch) to remove from the DSM (default 20). Wider raised areas are taken as ground.
    #[arg(long, value_name = "METRES")]
    pub ground_max_object: Option<f64>,
    /// Ground filter: slope threshold, rise over run (default 0.15); about the steepest
    /// slope of the ground itself.
    #[arg(long, value_name = "RISE/RUN")]
    pub ground_slope: Option<f64>,
    /// Ground filter: a cell within this many metres of the ground surface (plus the
    /// scaling below) is ground (default 0.5).
    #[arg(long, value_name = "METRES")]
    pub ground_threshold: Option<f64>,
    /// Ground filter: metres of tolerance added per unit of the ground's gradient
    /// (default 1.25).
    #[arg(long, value_name = "METRES")]
    pub ground_scaling: Option<f64>,
    /// Ground filter: window of the openings (default square).
    #[arg(long, value_name = "square|disc")]
    pub ground_window: Option<String>,
    /// Ground filter: farthest distance in metres the ground is interpolated from the
    /// nearest ground cell (default: the widest object); beyond it dtm and height are
    /// nodata and `ground` is 2.
    #[arg(long, value_name = "METRES")]
    pub ground_reach: Option<f64>,
    /// Ground filter: cells whose NDVI exceeds 0.5 are not ground (needs red and nir bands).
    #[arg(long)]
    pub ground_ndvi: bool,
    /// Ground filter: NDVI guidance with this threshold instead of 0.5.
    #[arg(long, value_name = "NDVI", allow_hyphen_values = true)]
    pub ground_ndvi_max: Option<f64>,
}

impl GroundArgs {
    /// The flags as a settings section (unset flags stay unset).
    pub fn section(&self) -> GroundSection {
        GroundSection {
            max_object_m: self.ground_max_object,
            slope: self.ground_slope,
            elevation_threshold_m: self.ground_threshold,
            slope_scale_m: self.ground_scaling,
            window: self.ground_window.clone(),
            reach_m: self.ground_reach,
            ndvi_max: self.ground_ndvi_max,
            ndvi: self.ground_ndvi.then_some(true),
        }
    }
}
