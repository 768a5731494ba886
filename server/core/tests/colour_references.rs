//! Colour conversions and differences checked against published reference data.

use isotint_core::colour::{ciede2000, delta_e_ab, lab_from_linear, Lab};
use isotint_core::Photo;
use palette::Srgb;

/// (L1, a1, b1, L2, a2, b2, ΔE00)
// source: Sharma, Wu & Dalal 2005, "The CIEDE2000 color-difference formula: implementation
// notes, supplementary test data, and mathematical observations", Table 1 (all 34 pairs).
const SHARMA_PAIRS: [[f32; 7]; 34] = [
    [50.0000, 2.6772, -79.7751, 50.0000, 0.0000, -82.7485, 2.0425],
    [50.0000, 3.1571, -77.2803, 50.0000, 0.0000, -82.7485, 2.8615],
    [50.0000, 2.8361, -74.0200, 50.0000, 0.0000, -82.7485, 3.4412],
    [
        50.0000, -1.3802, -84.2814, 50.0000, 0.0000, -82.7485, 1.0000,
    ],
    [
        50.0000, -1.1848, -84.8006, 50.0000, 0.0000, -82.7485, 1.0000,
    ],
    [
        50.0000, -0.9009, -85.5211, 50.0000, 0.0000, -82.7485, 1.0000,
    ],
    [50.0000, 0.0000, 0.0000, 50.0000, -1.0000, 2.0000, 2.3669],
    [50.0000, -1.0000, 2.0000, 50.0000, 0.0000, 0.0000, 2.3669],
    [50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0009, 7.1792],
    [50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0010, 7.1792],
    [50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0011, 7.2195],
    [50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0012, 7.2195],
    [50.0000, -0.0010, 2.4900, 50.0000, 0.0009, -2.4900, 4.8045],
    [50.0000, -0.0010, 2.4900, 50.0000, 0.0010, -2.4900, 4.8045],
    [50.0000, -0.0010, 2.4900, 50.0000, 0.0011, -2.4900, 4.7461],
    [50.0000, 2.5000, 0.0000, 50.0000, 0.0000, -2.5000, 4.3065],
    [50.0000, 2.5000, 0.0000, 73.0000, 25.0000, -18.0000, 27.1492],
    [50.0000, 2.5000, 0.0000, 61.0000, -5.0000, 29.0000, 22.8977],
    [50.0000, 2.5000, 0.0000, 56.0000, -27.0000, -3.0000, 31.9030],
    [50.0000, 2.5000, 0.0000, 58.0000, 24.0000, 15.0000, 19.4535],
    [50.0000, 2.5000, 0.0000, 50.0000, 3.1736, 0.5854, 1.0000],
    [50.0000, 2.5000, 0.0000, 50.0000, 3.2972, 0.0000, 1.0000],
    [50.0000, 2.5000, 0.0000, 50.0000, 1.8634, 0.5757, 1.0000],
    [50.0000, 2.5000, 0.0000, 50.0000, 3.2592, 0.3350, 1.0000],
    [
        60.2574, -34.0099, 36.2677, 60.4626, -34.1751, 39.4387, 1.2644,
    ],
    [
        63.0109, -31.0961, -5.8663, 62.8187, -29.7946, -4.0864, 1.2630,
    ],
    [61.2901, 3.7196, -5.3901, 61.4292, 2.2480, -4.9620, 1.8731],
    [35.0831, -44.1164, 3.7933, 35.0232, -40.0716, 1.5901, 1.8645],
    [
        22.7233, 20.0904, -46.6940, 23.0331, 14.9730, -42.5619, 2.0373,
    ],
    [36.4612, 47.8580, 18.3852, 36.2715, 50.5065, 21.2231, 1.4146],
    [90.8027, -2.0831, 1.4410, 91.1528, -1.6435, 0.0447, 1.4441],
    [90.9257, -0.5406, -0.9208, 88.6381, -0.8985, -0.7239, 1.5381],
    [6.7747, -0.2908, -2.4247, 5.8714, -0.0985, -2.2286, 0.6377],
    [2.0776, 0.0795, -1.1350, 0.9033, -0.0636, -0.5514, 0.9082],
];

#[test]
fn ciede2000_matches_all_sharma_wu_dalal_pairs_to_four_decimals() {
    // source: Sharma, Wu & Dalal 2005, CIEDE2000 test data (Table 1)
    for (i, p) in SHARMA_PAIRS.iter().enumerate() {
        let d = ciede2000(Lab::new(p[0], p[1], p[2]), Lab::new(p[3], p[4], p[5]));
        assert!(
            (d - p[6]).abs() < 1e-3,
            "pair {}: got {d}, expected {}",
            i + 1,
            p[6]
        );
    }
}

#[test]
fn ciede2000_is_symmetric_and_zero_for_equal_colours() {
    let a = Lab::new(61.29, 3.72, -5.39);
    let b = Lab::new(35.08, -44.12, 3.79);
    assert_eq!(ciede2000(a, a), 0.0);
    assert!((ciede2000(a, b) - ciede2000(b, a)).abs() < 1e-4);
}

#[test]
fn delta_e_ab_is_the_euclidean_distance() {
    // source: CIE 15:2004, CIE 1976 colour difference ΔE*ab = sqrt(ΔL*² + Δa*² + Δb*²)
    let d = delta_e_ab(Lab::new(50.0, 3.0, 4.0), Lab::new(50.0, 0.0, 0.0));
    assert!((d - 5.0).abs() < 1e-6);
}

fn lab_of_srgb8(r: u8, g: u8, b: u8) -> Lab {
    let photo = Photo::from_srgb8(1, 1, vec![Srgb::new(r, g, b)]).unwrap();
    lab_from_linear(photo.linear(0))
}

#[test]
fn srgb_primaries_and_white_convert_to_their_reference_cielab_values() {
    // source: IEC 61966-2-1 (sRGB transfer function and primaries) with CIE 15:2004 CIELAB
    // formulas, D65 white; reference values as widely tabulated (from memory, 4 significant
    // figures): red (53.24, 80.09, 67.20), green (87.73, -86.18, 83.18), blue (32.30, 79.19,
    // -107.86), white (100, 0, 0), sRGB 128 grey L* = 53.59.
    let cases: [((u8, u8, u8), [f32; 3]); 5] = [
        ((255, 0, 0), [53.24, 80.09, 67.20]),
        ((0, 255, 0), [87.73, -86.18, 83.18]),
        ((0, 0, 255), [32.30, 79.19, -107.86]),
        ((255, 255, 255), [100.0, 0.0, 0.0]),
        ((128, 128, 128), [53.59, 0.0, 0.0]),
    ];
    for ((r, g, b), want) in cases {
        let lab = lab_of_srgb8(r, g, b);
        for (got, want) in [lab.l, lab.a, lab.b].iter().zip(want) {
            assert!(
                (got - want).abs() < 0.05,
                "sRGB ({r},{g},{b}): got {lab:?}, want {want:?}"
            );
        }
    }
}

#[test]
fn a_sixteen_bit_photo_keeps_finer_steps_than_eight_bit() {
    use image::{DynamicImage, ImageBuffer, Rgb};
    let img: ImageBuffer<Rgb<u16>, Vec<u16>> = ImageBuffer::from_fn(2, 1, |x, _| {
        let v = 30_000 + x as u16;
        Rgb([v, v, v])
    });
    let photo = Photo::from_dynamic(DynamicImage::ImageRgb16(img));
    assert_eq!(photo.bit_depth(), 16);
    assert!(photo.linear(1).red > photo.linear(0).red);
}
