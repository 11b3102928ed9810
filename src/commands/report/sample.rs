//! How many frames the report's costly parts use: the probes' training side and the maps.
//!
//! A probe fit and the map's full-space purity metrics cost in proportion to the layer's
//! width: a report on 13 layers 768 wide with the standalone commands' caps (20 000 training
//! frames per probe fit, 10 000 map points) took 257 s on 2 cores, 85 s with this sample
//! (bench/results.md, 2026-12-03). So, unless
//! told otherwise (`--probe-frames`, `--map-points`), the report keeps the commands' caps on
//! layers up to [`FULL_WIDTH`] wide and scales both caps by `FULL_WIDTH / width` on wider
//! layers, never below a floor. The choice depends only on the widest selected layer of the
//! captures, so every unit of a run split over a cluster makes the same one, and the page,
//! `run.json` and the progress lines say what was sampled. The probes' test side is not
//! scaled: every layer is scored on the same test frames the `probe` command would use.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use crate::analysis::map::MapOptions;
use crate::analysis::probe::ProbeOptions;
use crate::capture::{Capture, LayerSelection};

/// Layers up to this wide get the standalone commands' caps in a report.
pub const FULL_WIDTH: usize = 128;
/// The fewest training frames per probe fit an automatic choice gives.
pub const MIN_PROBE_FRAMES: usize = 2_000;
/// The fewest map points an automatic choice gives.
pub const MIN_MAP_POINTS: usize = 1_000;

/// A cap the user sets, or `auto` (chosen from the layers' width).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Size {
    /// Chosen from the widest layer.
    #[default]
    Auto,
    /// This many (for probes, 0 means every training frame).
    Fixed(usize),
}

impl FromStr for Size {
    type Err = String;
    fn from_str(s: &str) -> Result<Size, String> {
        if s.eq_ignore_ascii_case("auto") {
            return Ok(Size::Auto);
        }
        s.parse::<usize>()
            .map(Size::Fixed)
            .map_err(|_| format!("expected `auto` or a whole number, found `{s}`"))
    }
}

impl fmt::Display for Size {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Size::Auto => f.write_str("auto"),
            Size::Fixed(n) => write!(f, "{n}"),
        }
    }
}

/// The report's sampling options.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct SampleOptions {
    /// Training frames per probe fit.
    pub probe_frames: Size,
    /// Points per layer map.
    pub map_points: Size,
}

impl SampleOptions {
    /// Refuse a map of fewer than 3 points (exit code 2).
    pub fn check(&self) -> Result<(), String> {
        match self.map_points {
            Size::Fixed(n) if n < 3 => Err(format!(
                "--map-points: expected `auto` or at least 3 points, found {n}"
            )),
            _ => Ok(()),
        }
    }
}

/// What the report samples, once the captures are open.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct SampleChoice {
    /// Widest selected layer over the captures.
    pub width: usize,
    /// Training frames per probe fit (0: all).
    pub probe_frames: usize,
    /// The `probe` command's default.
    pub probe_default: usize,
    /// Points per layer map.
    pub map_points: usize,
    /// The `map` command's default.
    pub map_default: usize,
    /// Whether either cap was lowered automatically for the layers' width.
    pub scaled: bool,
}

/// `default` scaled for a layer `width` wide: unchanged up to [`FULL_WIDTH`], then by
/// `FULL_WIDTH / width`, rounded down, never below `floor` nor above `default`.
pub fn scaled(default: usize, width: usize, floor: usize) -> usize {
    if width <= FULL_WIDTH || default == 0 {
        return default;
    }
    (default * FULL_WIDTH / width).max(floor).min(default)
}

/// The sample for captures whose widest selected layer is `width` wide.
pub fn choose(opts: &SampleOptions, width: usize) -> SampleChoice {
    let probe_default = ProbeOptions::default().max_train_frames;
    let map_default = MapOptions::default().max_points;
    let probe_frames = match opts.probe_frames {
        Size::Fixed(n) => n,
        Size::Auto => scaled(probe_default, width, MIN_PROBE_FRAMES),
    };
    let map_points = match opts.map_points {
        Size::Fixed(n) => n,
        Size::Auto => scaled(map_default, width, MIN_MAP_POINTS),
    };
    let scaled = (opts.probe_frames == Size::Auto && probe_frames != probe_default)
        || (opts.map_points == Size::Auto && map_points != map_default);
    SampleChoice {
        width,
        probe_frames,
        probe_default,
        map_points,
        map_default,
        scaled,
    }
}

/// The widest layer of `caps` that `layers` selects (all when None; 0 when none).
pub fn widest(caps: &[Capture], layers: Option<&LayerSelection>) -> usize {
    caps.iter()
        .flat_map(|c| {
            let picked = c.select_layers(layers).unwrap_or_default();
            picked
                .into_iter()
                .filter_map(|i| c.layers.get(i).map(|l| l.dim()))
                .collect::<Vec<_>>()
        })
        .max()
        .unwrap_or(0)
}

/// A thousands-grouped count ("3 333"), as the page writes counts.
fn count(n: usize) -> String {
    let s = n.to_string();
    let mut out = String::new();
    for (i, ch) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push('\u{202f}');
        }
        out.push(ch);
    }
    out
}

impl SampleChoice {
    /// One paragraph saying what the report sampled, for the page and the progress lines.
    pub fn sentence(&self) -> String {
        let probe = if self.probe_frames == 0 {
            "each probe trained on every training frame".to_string()
        } else {
            format!(
                "each probe trained on at most {} frames per fit (the probe command's default: {})",
                count(self.probe_frames),
                count(self.probe_default)
            )
        };
        let map = format!(
            "each layer map shows at most {} points (the map command's default: {})",
            count(self.map_points),
            count(self.map_default)
        );
        if self.scaled {
            format!(
                "Sampled for time: the layers are {w} wide, so {probe} and {map}; the caps shrink \
                 by {full}/{w} on layers wider than {full}. Probes trained on fewer frames read \
                 lower, and purity on fewer points is noisier: compare layers within this page, \
                 not with a run of probe or map. The full caps: --probe-frames {pd} --map-points \
                 {md}. Each probe is scored on the same test frames as the probe command's.",
                w = self.width,
                full = FULL_WIDTH,
                pd = self.probe_default,
                md = self.map_default,
            )
        } else {
            format!("Sample: {probe}, and {map}.")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn narrow_layers_keep_the_commands_caps_and_wide_ones_shrink_by_width() {
        let auto = SampleOptions::default();
        let c = choose(&auto, 48);
        assert_eq!(
            (c.probe_frames, c.map_points, c.scaled),
            (20_000, 10_000, false)
        );
        let c = choose(&auto, 128);
        assert_eq!(
            (c.probe_frames, c.map_points, c.scaled),
            (20_000, 10_000, false)
        );
        // 20 000 × 128 / 768 = 3 333.3 and 10 000 × 128 / 768 = 1 666.7, rounded down
        let c = choose(&auto, 768);
        assert_eq!(
            (c.probe_frames, c.map_points, c.scaled),
            (3_333, 1_666, true)
        );
        // 20 000 × 128 / 1024 = 2 500; 10 000 × 128 / 1024 = 1 250
        let c = choose(&auto, 1024);
        assert_eq!((c.probe_frames, c.map_points), (2_500, 1_250));
        // floors
        let c = choose(&auto, 4096);
        assert_eq!((c.probe_frames, c.map_points), (2_000, 1_000));
    }

    #[test]
    fn a_set_cap_wins_and_is_not_called_sampled_for_time() {
        let o = SampleOptions {
            probe_frames: Size::Fixed(20_000),
            map_points: Size::Fixed(10_000),
        };
        let c = choose(&o, 768);
        assert_eq!(
            (c.probe_frames, c.map_points, c.scaled),
            (20_000, 10_000, false)
        );
        assert!(c.sentence().starts_with("Sample: "), "{}", c.sentence());
        let o = SampleOptions {
            probe_frames: Size::Fixed(0),
            map_points: Size::Auto,
        };
        let c = choose(&o, 768);
        assert_eq!((c.probe_frames, c.map_points, c.scaled), (0, 1_666, true));
        assert!(c.sentence().contains("every training frame"));
    }

    #[test]
    fn sizes_parse_and_bad_ones_are_refused() {
        assert_eq!("auto".parse::<Size>(), Ok(Size::Auto));
        assert_eq!("AUTO".parse::<Size>(), Ok(Size::Auto));
        assert_eq!("5000".parse::<Size>(), Ok(Size::Fixed(5000)));
        assert!("5k".parse::<Size>().is_err());
        assert!("-1".parse::<Size>().is_err());
        let o = SampleOptions {
            probe_frames: Size::Auto,
            map_points: Size::Fixed(2),
        };
        assert!(o.check().unwrap_err().contains("--map-points"));
    }

    #[test]
    fn the_sentence_names_the_width_the_caps_and_how_to_lift_them() {
        let s = choose(&SampleOptions::default(), 768).sentence();
        for part in [
            "768 wide",
            "3\u{202f}333 frames",
            "1\u{202f}666 points",
            "--probe-frames 20000 --map-points 10000",
        ] {
            assert!(s.contains(part), "{part:?} missing from {s:?}");
        }
    }
}
