//! Finding the specimen in a dark-field photo when no mask is given.
//!
//! In a dark-field circular polariscope the background is the polariscope's extinction: uniformly
//! dark and featureless. [`find_specimen`] takes as background every *calm* pixel (its whole
//! (2·[`CALM_RADIUS`]+1)² window no brighter than the background's level plus
//! [`DARK_MARGIN_CODES`]) that is joined to the photo's border through calm pixels, and every
//! calm region enclosed by the specimen that is at least [`hole_min_pixels`] large (a hole:
//! holes are black too, and no zero order). The background is then grown back by
//! [`CALM_RADIUS`] into dark pixels, so that the specimen's edge lies where the photo rises
//! above the background's level. Everything else is the specimen.
//!
//! What it cannot tell apart (DEVELOPERS.md, "Masks found from the photo"): a zero-order zone
//! of the specimen that reaches its edge (an unloaded beam end, the stress-free rim of a disc
//! in compression) looks exactly like the background beside it in a dark-field photo, and is
//! taken as background; an enclosed zero-order zone as large as a hole is taken as a hole.
//! Smaller enclosed dark zones (isotropic points, a neutral axis) stay in the specimen, as do
//! dark zones with any pattern in them.

use palette::{LinSrgb, Srgb};

use crate::colour::Photo;
use crate::error::{CoreError, CoreResult};
use crate::geometry::Mask;

/// Half-width of the window that must be wholly dark for a pixel to count as calm, pixels.
pub const CALM_RADIUS: usize = 2;
/// How much brighter than the background's level (8-bit sRGB codes of the brightest channel) a
/// pixel may be and still be dark: a few times the sensor noise of a camera and JPEG's ringing
/// next to edges (common practice, no source).
pub const DARK_MARGIN_CODES: f32 = 20.0;
/// Border pixels darker than this (8-bit sRGB code of the brightest channel) are candidates for
/// the background's level; brighter ones belong to a specimen that reaches the border.
pub const BACKGROUND_CEILING_CODES: f32 = 64.0;
/// An enclosed calm region is a hole when it covers at least the square of this share of the
/// photo's shorter side (so the rule scales with the photo).
pub const HOLE_SIDE_SHARE: f64 = 0.04;

/// How the specimen of a map was chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MaskSource {
    /// A mask the user gave.
    Given,
    /// Found from the photo by [`find_specimen`].
    Found,
    /// Found from the photo helped by a light-field photo ([`find_specimen_with_light_field`]).
    FoundWithLightField,
    /// The whole photo: asked for, or nothing was found (a photo dark everywhere).
    WholePhoto,
}

impl MaskSource {
    /// How people read it.
    pub fn describe(self) -> &'static str {
        match self {
            MaskSource::Given => "given",
            MaskSource::Found => "found from the photo",
            MaskSource::FoundWithLightField => "found from the photo and its light-field photo",
            MaskSource::WholePhoto => "whole photo",
        }
    }
}

/// The mask a map used: where it came from and the share of the photo's pixels it covers (0–1).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct MaskUsed {
    /// Given, found or the whole photo.
    pub source: MaskSource,
    /// Specimen pixels over all pixels of the photo.
    pub specimen_share: f64,
}

impl MaskUsed {
    /// The source and share of `mask` (`None` = the whole photo).
    pub fn of(source: MaskSource, mask: Option<&Mask>) -> MaskUsed {
        let specimen_share = mask.map_or(1.0, |m| {
            let inside = m.as_slice().iter().filter(|v| **v).count();
            inside as f64 / m.as_slice().len().max(1) as f64
        });
        MaskUsed {
            source,
            specimen_share,
        }
    }

    /// One line for people, e.g. "found from the photo, 42.0 % of its pixels".
    pub fn describe(&self) -> String {
        format!(
            "{}, {:.1} % of its pixels",
            self.source.describe(),
            100.0 * self.specimen_share
        )
    }
}

/// The smallest enclosed calm region (pixels) taken as a hole in a `width` × `height` photo.
pub fn hole_min_pixels(width: u32, height: u32) -> usize {
    let side = (HOLE_SIDE_SHARE * f64::from(width.min(height))).max(1.0);
    (side * side).ceil() as usize
}

/// The specimen of a dark-field photo (see the module's notes), or `None` when the whole photo
/// is dark and featureless (nothing to find).
pub fn find_specimen(photo: &Photo) -> Option<Mask> {
    let (w, h) = (photo.width() as usize, photo.height() as usize);
    let dark = dark_pixels(photo);
    let calm = calm_pixels(&dark, w, h, CALM_RADIUS);
    let mut background = vec![false; w * h];
    // Calm regions joined to the border, then enclosed ones large enough to be holes.
    let mut region = Vec::new();
    for p in border_pixels(w, h) {
        flood(p, &calm, &mut background, w, h, &mut region);
        region.clear();
    }
    let hole_min = hole_min_pixels(photo.width(), photo.height());
    let mut seen = background.clone();
    for p in 0..w * h {
        if calm[p] && !seen[p] {
            region.clear();
            flood(p, &calm, &mut seen, w, h, &mut region);
            if region.len() >= hole_min {
                for &q in &region {
                    background[q as usize] = true;
                }
            }
        }
    }
    drop((calm, seen, region));
    grow_into(&mut background, &dark, w, h, CALM_RADIUS);
    let inside: Vec<bool> = background.iter().map(|b| !b).collect();
    if !inside.contains(&true) {
        return None;
    }
    Some(Mask::new(photo.width(), photo.height(), inside).expect("one flag per pixel"))
}

/// A pixel of a light-field photo is lit when its brightest channel passes at least this share
/// of the light-field background's level (linear light): enough below 1 for vignetting, well
/// above a dark outline blurred by the lens (common practice, no source).
pub const LIT_SHARE: f32 = 0.5;

/// The specimen of a dark-field photo helped by a light-field photo of the same set-up
/// (analyser turned 90°, same camera position, same size), or `None` when neither shows one.
///
/// The dark-field specimen ([`find_specimen`]) loses zero-order zones on its edge to the
/// background. In light field the background is bright, and so are those zones, but the model's
/// outline shows as a dark line between them. The outer background (the dark-field background
/// joined to the photo's border; holes are left alone) is split in the light-field photo: its
/// pixels joined to the border through lit pixels (brightest channel at least [`LIT_SHARE`] of
/// the light-field background's level, the median over those border pixels) stay background,
/// the rest lies inside the outline. The dark-field specimen is grown into those pixels that
/// touch it (all of them when the dark-field photo shows no specimen: an unloaded model).
/// A light-field photo whose background is no brighter than [`BACKGROUND_CEILING_CODES`] is
/// refused (field `light_field_photo`). Pixel conventions as [`find_specimen`]; the light-field photo's brightness is read in
/// linear light.
pub fn find_specimen_with_light_field(dark: &Photo, light: &Photo) -> CoreResult<Option<Mask>> {
    if (light.width(), light.height()) != (dark.width(), dark.height()) {
        return Err(CoreError::invalid(
            "light_field_photo",
            format!(
                "is {}×{} pixels, the photo {}×{}: both must be taken from the same place",
                light.width(),
                light.height(),
                dark.width(),
                dark.height()
            ),
        ));
    }
    let (w, h) = (dark.width() as usize, dark.height() as usize);
    let found = find_specimen(dark);
    let specimen: Vec<bool> = found
        .as_ref()
        .map_or_else(|| vec![false; w * h], |m| m.as_slice().to_vec());
    // The outer background: the dark-field background joined to the border.
    let background: Vec<bool> = specimen.iter().map(|v| !v).collect();
    let mut outer = vec![false; w * h];
    let mut region = Vec::new();
    for p in border_pixels(w, h) {
        flood(p, &background, &mut outer, w, h, &mut region);
    }
    let brightest = |c: LinSrgb<f32>| c.red.max(c.green).max(c.blue);
    let mut levels: Vec<f32> = border_pixels(w, h)
        .filter(|p| outer[*p])
        .map(|p| brightest(light.linear(p)))
        .collect();
    if levels.is_empty() {
        return Ok(found);
    }
    levels.sort_by(f32::total_cmp);
    let level = levels[levels.len() / 2];
    // A dark background is no light field (a second dark-field photo, say): its noise would
    // pass for an outline.
    if encoded_codes(level) < BACKGROUND_CEILING_CODES {
        return Err(CoreError::invalid(
            "light_field_photo",
            format!(
                "its background is dark (8-bit code {:.0} of the brightest channel, below {}): \
                 take it with the analyser turned 90° from the dark-field photo's",
                encoded_codes(level),
                BACKGROUND_CEILING_CODES
            ),
        ));
    }
    let lit_limit = LIT_SHARE * level;
    let mut open = vec![false; w * h];
    let mut row = Vec::new();
    for y in 0..h {
        light.linear_row(y as u32, &mut row);
        for (x, c) in row.iter().enumerate() {
            let p = y * w + x;
            open[p] = outer[p] && brightest(*c) >= lit_limit;
        }
    }
    let mut outside = vec![false; w * h];
    region.clear();
    for p in border_pixels(w, h) {
        flood(p, &open, &mut outside, w, h, &mut region);
    }
    // The specimen and the outer background's pixels inside the outline (holes stay out).
    let within_outline: Vec<bool> = (0..w * h)
        .map(|p| specimen[p] || (outer[p] && !outside[p]))
        .collect();
    let mut inside = vec![false; w * h];
    region.clear();
    // Grown from the dark-field specimen, or, with none, from every pixel in the outline.
    let seeds = (0..w * h).filter(|p| specimen[*p] || found.is_none());
    for p in seeds {
        flood(p, &within_outline, &mut inside, w, h, &mut region);
    }
    if !inside.contains(&true) {
        return Ok(None);
    }
    Ok(Some(Mask::new(dark.width(), dark.height(), inside)?))
}

/// The photo's border pixels (corners twice).
fn border_pixels(w: usize, h: usize) -> impl Iterator<Item = usize> {
    (0..w)
        .flat_map(move |x| [x, (h - 1) * w + x])
        .chain((0..h).flat_map(move |y| [y * w, y * w + w - 1]))
}

/// Pixels no brighter than the background's level plus [`DARK_MARGIN_CODES`]. The level is the
/// median brightness of the border pixels darker than [`BACKGROUND_CEILING_CODES`] (0 if none
/// is: the specimen fills the border). Brightness is the brightest channel.
fn dark_pixels(photo: &Photo) -> Vec<bool> {
    let (w, h) = (photo.width() as usize, photo.height() as usize);
    let brightest = |c: LinSrgb<f32>| c.red.max(c.green).max(c.blue);
    let mut codes: Vec<f32> = border_pixels(w, h)
        .map(|p| encoded_codes(brightest(photo.linear(p))))
        .filter(|b| *b < BACKGROUND_CEILING_CODES)
        .collect();
    codes.sort_by(f32::total_cmp);
    let level = codes.get(codes.len() / 2).copied().unwrap_or(0.0);
    let limit = linear_of_codes(level + DARK_MARGIN_CODES);
    let mut dark = Vec::with_capacity(w * h);
    let mut row = Vec::new();
    for y in 0..h {
        photo.linear_row(y as u32, &mut row);
        dark.extend(row.iter().map(|c| brightest(*c) <= limit));
    }
    dark
}

/// The 8-bit sRGB code (0–255, fractional) of a linear-light value.
fn encoded_codes(v: f32) -> f32 {
    255.0 * Srgb::<f32>::from_linear(LinSrgb::new(v.clamp(0.0, 1.0), 0.0, 0.0)).red
}

/// The linear-light value of an 8-bit sRGB code (0–255, fractional).
fn linear_of_codes(codes: f32) -> f32 {
    Srgb::new((codes / 255.0).clamp(0.0, 1.0), 0.0, 0.0)
        .into_linear::<f32>()
        .red
}

/// Pixels whose (2·`r`+1)² window holds only dark pixels; outside the photo counts as dark, so
/// that the border's own pixels can be calm.
fn calm_pixels(dark: &[bool], w: usize, h: usize, r: usize) -> Vec<bool> {
    // Along one line: calm where no bright pixel lies within r.
    let pass = |get: &dyn Fn(usize) -> bool, len: usize, out: &mut dyn FnMut(usize, bool)| {
        let mut last_bright: Option<usize> = None;
        let mut next_bright = vec![usize::MAX; len];
        let mut upcoming = usize::MAX;
        for i in (0..len).rev() {
            if !get(i) {
                upcoming = i;
            }
            next_bright[i] = upcoming;
        }
        for (i, &next) in next_bright.iter().enumerate() {
            if !get(i) {
                last_bright = Some(i);
            }
            let near_before = last_bright.is_some_and(|b| i - b <= r);
            let near_after = next != usize::MAX && next - i <= r;
            out(i, !(near_before || near_after));
        }
    };
    let mut rows = vec![false; w * h];
    for y in 0..h {
        pass(&|x| dark[y * w + x], w, &mut |x, v| rows[y * w + x] = v);
    }
    let mut both = vec![false; w * h];
    for x in 0..w {
        pass(&|y| rows[y * w + x], h, &mut |y, v| both[y * w + x] = v);
    }
    both
}

/// Marks every pixel joined to `start` through `open` pixels (4-neighbours) in `marked`, and
/// appends the newly marked ones to `found` (also the work queue).
fn flood(
    start: usize,
    open: &[bool],
    marked: &mut [bool],
    w: usize,
    h: usize,
    found: &mut Vec<u32>,
) {
    if !open[start] || marked[start] {
        return;
    }
    marked[start] = true;
    let mut next = found.len();
    found.push(start as u32);
    while next < found.len() {
        let p = found[next] as usize;
        next += 1;
        let (x, y) = (p % w, p / w);
        let neighbours = [
            (x > 0).then(|| p - 1),
            (x + 1 < w).then(|| p + 1),
            (y > 0).then(|| p - w),
            (y + 1 < h).then(|| p + w),
        ];
        for q in neighbours.into_iter().flatten() {
            if open[q] && !marked[q] {
                marked[q] = true;
                found.push(q as u32);
            }
        }
    }
}

/// Grows `region` by up to `steps` pixels (8-neighbours) into `open` pixels.
fn grow_into(region: &mut [bool], open: &[bool], w: usize, h: usize, steps: usize) {
    for _ in 0..steps {
        let before = region.to_vec();
        for y in 0..h {
            for x in 0..w {
                let p = y * w + x;
                if before[p] || !open[p] {
                    continue;
                }
                let near = (y.saturating_sub(1)..(y + 2).min(h))
                    .any(|ny| (x.saturating_sub(1)..(x + 2).min(w)).any(|nx| before[ny * w + nx]));
                region[p] = near;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use palette::Srgb;

    /// A photo from rows of characters: '.' black, 'o' a bright tint.
    fn photo(rows: &[&str]) -> Photo {
        let (w, h) = (rows[0].len() as u32, rows.len() as u32);
        let pixels = rows
            .iter()
            .flat_map(|r| r.chars())
            .map(|c| match c {
                '.' => Srgb::new(0, 0, 0),
                'o' => Srgb::new(200, 120, 40),
                'w' => Srgb::new(235, 235, 235),
                'd' => Srgb::new(25, 25, 25),
                _ => panic!("unknown pixel {c:?}"),
            })
            .collect();
        Photo::from_srgb8(w, h, pixels).unwrap()
    }

    fn rows_of(mask: &Mask) -> Vec<String> {
        (0..mask.height())
            .map(|y| {
                (0..mask.width())
                    .map(|x| if mask.contains(x, y) { '#' } else { '.' })
                    .collect()
            })
            .collect()
    }

    #[test]
    fn a_bright_block_on_a_black_background_is_found_exactly() {
        let p = photo(&[
            "............",
            "............",
            "............",
            "....oooo....",
            "....oooo....",
            "....oooo....",
            "............",
            "............",
            "............",
        ]);
        let mask = find_specimen(&p).expect("a specimen");
        let rows = rows_of(&mask);
        assert_eq!(rows[3..6], ["....####...."; 3]);
        assert!(rows[..3]
            .iter()
            .chain(&rows[6..])
            .all(|r| r == "............"));
        let share = MaskUsed::of(MaskSource::Found, Some(&mask)).specimen_share;
        assert_eq!(share, 12.0 / 108.0);
    }

    #[test]
    fn a_photo_the_specimen_fills_is_all_specimen() {
        let p = photo(&["oooooo", "oooooo", "oooooo", "oooooo"]);
        let mask = find_specimen(&p).expect("a specimen");
        assert!(mask.as_slice().iter().all(|v| *v));
    }

    #[test]
    fn a_photo_dark_everywhere_has_no_specimen() {
        assert_eq!(find_specimen(&photo(&["......"; 6])), None);
    }

    #[test]
    fn a_large_enclosed_black_region_is_a_hole_and_a_small_one_is_kept() {
        // A 30 × 30 plate (hole threshold (0.04 × 30)² → 2 px) with a 9 × 9 hole and, apart
        // from it, a single black pixel (too small to hold a calm window: a zero-order point).
        let mut rows = vec!["o".repeat(30); 30];
        for row in rows.iter_mut().take(19).skip(10) {
            row.replace_range(10..19, ".........");
        }
        rows[25].replace_range(25..26, ".");
        let refs: Vec<&str> = rows.iter().map(String::as_str).collect();
        let mask = find_specimen(&photo(&refs)).expect("a specimen");
        let outside: usize = mask.as_slice().iter().filter(|v| !**v).count();
        assert_eq!(outside, 81, "the 9 × 9 hole and nothing else");
        assert!(!mask.contains(14, 14) && !mask.contains(10, 10) && !mask.contains(18, 18));
        assert!(mask.contains(9, 9) && mask.contains(19, 19) && mask.contains(25, 25));
    }

    #[test]
    fn an_enclosed_black_region_smaller_than_a_hole_stays_in_the_specimen() {
        // 100 × 100 plate: holes need (0.04 × 100)² = 16 calm pixels; a 7 × 7 black square
        // holds 3 × 3 = 9 calm ones.
        let mut rows = vec!["o".repeat(100); 100];
        for row in rows.iter_mut().take(57).skip(50) {
            row.replace_range(50..57, ".......");
        }
        let refs: Vec<&str> = rows.iter().map(String::as_str).collect();
        let mask = find_specimen(&photo(&refs)).expect("a specimen");
        assert!(mask.as_slice().iter().all(|v| *v));
        assert_eq!(hole_min_pixels(100, 100), 16);
    }

    #[test]
    fn a_black_gap_narrower_than_the_calm_window_joins_two_parts() {
        // Two bright bars 3 px apart: the gap holds no calm pixel, so it is no background.
        let p = photo(&[
            "...............",
            "...............",
            "...............",
            "...ooo...ooo...",
            "...ooo...ooo...",
            "...ooo...ooo...",
            "...............",
            "...............",
            "...............",
        ]);
        let rows = rows_of(&find_specimen(&p).expect("a specimen"));
        assert_eq!(rows[3..6], ["...#########..."; 3]);
        assert!(rows[..3]
            .iter()
            .chain(&rows[6..])
            .all(|r| r == "..............."));
    }

    #[test]
    fn a_background_lifted_by_stray_light_is_still_background() {
        // Background at code 30 (stray light), the specimen's tint well above it.
        let (w, h) = (16u32, 12u32);
        let pixels = (0..w * h)
            .map(|i| {
                let (x, y) = (i % w, i / w);
                if (5..11).contains(&x) && (4..8).contains(&y) {
                    Srgb::new(180, 200, 90)
                } else {
                    Srgb::new(30, 28, 29)
                }
            })
            .collect();
        let mask = find_specimen(&Photo::from_srgb8(w, h, pixels).unwrap()).unwrap();
        let inside: usize = mask.as_slice().iter().filter(|v| **v).count();
        assert_eq!(inside, 6 * 4);
        assert!(mask.contains(5, 4) && mask.contains(10, 7) && !mask.contains(4, 4));
    }

    /// A `w` × `h` picture: `paint(x, y)` gives each pixel's character (see [`photo`]).
    fn drawn(w: usize, h: usize, paint: impl Fn(usize, usize) -> char) -> Photo {
        let rows: Vec<String> = (0..h)
            .map(|y| (0..w).map(|x| paint(x, y)).collect())
            .collect();
        let refs: Vec<&str> = rows.iter().map(String::as_str).collect();
        photo(&refs)
    }

    /// Whether (x, y) lies in the half-open box [x0, x1) × [y0, y1).
    fn within(x: usize, y: usize, (x0, y0, x1, y1): (usize, usize, usize, usize)) -> bool {
        (x0..x1).contains(&x) && (y0..y1).contains(&y)
    }

    /// Whether (x, y) is on the outermost ring of pixels of the box.
    fn on_ring(x: usize, y: usize, b: (usize, usize, usize, usize)) -> bool {
        within(x, y, b) && !within(x, y, (b.0 + 1, b.1 + 1, b.2 - 1, b.3 - 1))
    }

    #[test]
    fn a_light_field_outline_brings_back_a_beams_dark_ends() {
        // A 20 × 7 px beam (x 5–25, y 5–12) whose ends x < 11 and x ≥ 19 are zero order: black
        // like the background in dark field; in light field white inside a dark outline.
        let (beam, loaded) = ((5, 5, 25, 12), (11, 5, 19, 12));
        let dark = drawn(30, 17, |x, y| if within(x, y, loaded) { 'o' } else { '.' });
        let light = drawn(30, 17, |x, y| {
            if on_ring(x, y, beam) {
                'd'
            } else if within(x, y, loaded) {
                'o'
            } else {
                'w'
            }
        });
        let alone = find_specimen(&dark).expect("a specimen");
        assert!(!alone.contains(6, 8) && !alone.contains(23, 8) && alone.contains(15, 8));
        let both = find_specimen_with_light_field(&dark, &light)
            .unwrap()
            .expect("a specimen");
        for y in 0..17 {
            for x in 0..30 {
                assert_eq!(
                    both.contains(x, y),
                    within(x as usize, y as usize, beam),
                    "({x}, {y})"
                );
            }
        }
    }

    #[test]
    fn a_hole_inside_its_light_field_outline_stays_a_hole() {
        // A 22 × 22 plate on a 30 × 30 photo with a 6 × 6 hole; the hole is white in light
        // field and ringed by the plate's dark edge, like the zero-order ends above, but it is
        // no part of the outer background.
        let (plate, hole) = ((4, 4, 26, 26), (12, 12, 18, 18));
        let dark = drawn(30, 30, |x, y| {
            if within(x, y, plate) && !within(x, y, hole) {
                'o'
            } else {
                '.'
            }
        });
        let rim = (hole.0 - 1, hole.1 - 1, hole.2 + 1, hole.3 + 1);
        let light = drawn(30, 30, |x, y| {
            if on_ring(x, y, plate) || on_ring(x, y, rim) {
                'd'
            } else if within(x, y, plate) && !within(x, y, hole) {
                'o'
            } else {
                'w'
            }
        });
        let alone = find_specimen(&dark).expect("a specimen");
        assert!(
            !alone.contains(14, 14),
            "the dark-field finding takes the hole out"
        );
        let both = find_specimen_with_light_field(&dark, &light).unwrap();
        assert_eq!(both, Some(alone));
    }

    #[test]
    fn an_unloaded_model_dark_everywhere_is_found_from_its_light_field_outline() {
        let model = (5, 4, 15, 12);
        let dark = photo(&["...................."; 16]);
        let light = drawn(20, 16, |x, y| if on_ring(x, y, model) { 'd' } else { 'w' });
        assert_eq!(find_specimen(&dark), None);
        let mask = find_specimen_with_light_field(&dark, &light)
            .unwrap()
            .expect("a specimen");
        let inside = mask.as_slice().iter().filter(|v| **v).count();
        assert_eq!(inside, 10 * 8);
        assert!(mask.contains(5, 4) && mask.contains(14, 11) && !mask.contains(4, 4));
    }

    #[test]
    fn a_second_dark_field_photo_given_as_the_light_field_one_is_refused() {
        let dark = drawn(30, 17, |x, y| {
            if within(x, y, (11, 5, 19, 12)) {
                'o'
            } else {
                '.'
            }
        });
        let refused = find_specimen_with_light_field(&dark, &dark)
            .unwrap_err()
            .to_string();
        assert!(
            refused.contains("light_field_photo") && refused.contains("background is dark"),
            "{refused}"
        );
    }

    #[test]
    fn a_light_field_photo_of_another_size_is_refused_naming_it() {
        let dark = photo(&["......"; 6]);
        let light = photo(&["wwwww"; 6]);
        let refused = find_specimen_with_light_field(&dark, &light).unwrap_err();
        assert!(
            refused.to_string().contains("light_field_photo")
                && refused.to_string().contains("5×6 pixels, the photo 6×6"),
            "{refused}"
        );
    }
}
