//! The `--texture-*` flags of `terrastack build`: settings of the co-occurrence texture
//! behind the `glcm@R@SOURCE` features (docs/methods.md, "Texture bands").

use terrastack::texture::settings::{parse_range_flag, TextureSection};

#[derive(clap::Args, Debug, Default)]
pub struct TextureArgs {
    /// Texture: grey levels of the co-occurrence features, 2 to 256 (default 32).
    #[arg(long, value_name = "N")]
    pub texture_levels: Option<usize>,
    /// Texture: cells between the two cells of a co-occurrence pair, 1 to 64 (default 1).
    #[arg(long, value_name = "CELLS")]
    pub texture_distance: Option<usize>,
    /// Texture: the range SOURCE's values are quantised over, e.g. ndvi=0..1 (repeatable;
    /// default 0..1 for reflectance, an index's valid range; band math needs one).
    #[arg(long, value_name = "SOURCE=LOW..HIGH", value_parser = parse_range_arg, allow_hyphen_values = true)]
    pub texture_range: Vec<(String, String)>,
}

fn parse_range_arg(text: &str) -> Result<(String, String), String> {
    parse_range_flag(text).map_err(|e| e.to_string())
}

impl TextureArgs {
    /// The flags as a settings section (unset flags stay unset).
    pub fn section(&self) -> TextureSection {
        TextureSection {
            levels: self.texture_levels,
            distance_px: self.texture_distance,
            ranges: self.texture_range.iter().cloned().collect(),
        }
    }
}
