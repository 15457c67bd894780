//! The VOI functions against values worked by hand from their formulas in DICOM PS3.3
//! (C.11.2.1.2.1 LINEAR, C.11.2.1.3.2 LINEAR_EXACT, C.11.2.1.3.1 SIGMOID), with the output
//! range y_min..y_max taken as 0..1; the feed card forms; and apply_plain.

use spurion::feed::window::{VoiFunction, Windowing, apply_plain, voi_linear, voi_linear_exact, voi_sigmoid};
use ndarray::Array3;
use serde::{Deserialize, Serialize};

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() < 1e-12
}

// PS3.3 C.11.2.1.2.1: if x <= c - 0.5 - (w-1)/2 then y = ymin; else if x > c - 0.5 + (w-1)/2
// then y = ymax; else y = ((x - (c - 0.5)) / (w-1) + 0.5) * (ymax - ymin) + ymin.
#[test]
fn linear_by_hand() {
    // c = 40, w = 400: the window's ends are 40 − 0.5 ∓ 199.5 = −160 and 239.
    let y = |x| voi_linear(x, 40.0, 400.0);
    assert_eq!(y(-1000.0), 0.0);
    assert_eq!(y(-160.0), 0.0, "x at the lower end is still ymin (x <= …)");
    assert!(close(y(-159.0), 1.0 / 399.0), "(−159 − 39.5)/399 + 0.5 = 1/399");
    assert!(close(y(39.5), 0.5), "x = c − 0.5 is the middle");
    assert!(close(y(40.0), 0.5 + 0.5 / 399.0));
    assert!(close(y(139.25), 0.75), "(139.25 − 39.5)/399 + 0.5 = 0.75");
    assert!(close(y(239.0), 1.0), "x at the upper end is in the middle case and gives exactly ymax");
    assert_eq!(y(239.5), 1.0);
    // w = 2, c = 100: ends 99 and 100, (x − 99.5)/1 + 0.5 between.
    let y2 = |x| voi_linear(x, 100.0, 2.0);
    assert_eq!(y2(99.0), 0.0);
    assert!(close(y2(99.5), 0.5));
    assert!(close(y2(100.0), 1.0));
    assert_eq!(y2(100.5), 1.0);
}

// w = 1 is allowed (PS3.3 C.11.2.1.2.1: "Window Width shall always be greater than or equal to
// 1"): both ends are c − 0.5, the middle case is empty, and the function is a step.
#[test]
fn linear_width_one_is_a_step() {
    let y = |x| voi_linear(x, 100.0, 1.0);
    assert_eq!(y(99.0), 0.0);
    assert_eq!(y(99.5), 0.0, "x = c − 0.5 is ymin");
    assert_eq!(y(99.500001), 1.0);
    assert_eq!(y(100.0), 1.0);
    assert!(y(99.5).is_finite() && y(1e9).is_finite(), "no division by w − 1 = 0");
}

// PS3.3 C.11.2.1.3.2: x <= c − w/2 → ymin; x > c + w/2 → ymax; else ((x − c)/w + 0.5).
#[test]
fn linear_exact_by_hand() {
    let y = |x| voi_linear_exact(x, 40.0, 400.0);
    assert_eq!(y(-160.0), 0.0, "c − w/2 = −160 is ymin");
    assert!(close(y(-159.0), 0.0025), "(−159 − 40)/400 + 0.5 = 0.0025");
    assert!(close(y(40.0), 0.5));
    assert!(close(y(140.0), 0.75));
    assert!(close(y(240.0), 1.0), "c + w/2 = 240 gives ymax through the middle case");
    assert_eq!(y(240.1), 1.0);
    // Unlike LINEAR, a width below 1 is allowed: w = 0.5 around 10.
    assert!(close(voi_linear_exact(10.0, 10.0, 0.5), 0.5));
    assert_eq!(voi_linear_exact(9.75, 10.0, 0.5), 0.0);
}

// PS3.3 C.11.2.1.3.1: y = (ymax − ymin) / (1 + exp(−4 (x − c)/w)) + ymin.
#[test]
fn sigmoid_by_hand() {
    let y = |x| voi_sigmoid(x, 40.0, 400.0);
    assert!(close(y(40.0), 0.5));
    assert!(close(y(140.0), 1.0 / (1.0 + (-1.0f64).exp())), "−4·100/400 = −1");
    assert!(close(y(140.0), 0.731_058_578_630_004_9), "1/(1 + e^−1), by hand");
    assert!(close(y(-60.0), 0.268_941_421_369_995_1), "1/(1 + e^1)");
    assert!(close(y(440.0), 0.982_013_790_037_908_5), "1/(1 + e^−4)");
    assert_eq!(voi_sigmoid(-1e300, 40.0, 400.0), 0.0, "exp overflows to inf: y = ymin, no NaN");
}

#[derive(Debug, Serialize, Deserialize, PartialEq)]
struct Card {
    window: Windowing,
}

fn card(text: &str) -> Result<Windowing, String> {
    toml::from_str::<Card>(text).map(|c| c.window).map_err(|e| e.to_string())
}

#[test]
fn feed_card_forms() {
    assert_eq!(card(r#"window = "file""#), Ok(Windowing::File { index: 0 }));
    assert_eq!(card("window = { file = 2 }"), Ok(Windowing::File { index: 2 }));
    assert_eq!(card(r#"window = "min-max""#), Ok(Windowing::MinMax));
    assert_eq!(card(r#"window = "full-range""#), Ok(Windowing::FullRange));
    assert_eq!(
        card("window = { center = 40, width = 400 }"),
        Ok(Windowing::Fixed { center: 40.0, width: 400.0, function: VoiFunction::Linear })
    );
    assert_eq!(
        card(r#"window = { center = -600.5, width = 1500, function = "linear-exact" }"#),
        Ok(Windowing::Fixed { center: -600.5, width: 1500.0, function: VoiFunction::LinearExact })
    );
    for w in [
        Windowing::File { index: 0 },
        Windowing::File { index: 3 },
        Windowing::MinMax,
        Windowing::FullRange,
        Windowing::Fixed { center: 40.0, width: 400.0, function: VoiFunction::Sigmoid },
    ] {
        let text = toml::to_string(&Card { window: w.clone() }).unwrap();
        assert_eq!(card(&text), Ok(w), "round trip through {text}");
    }
}

#[test]
fn feed_card_mistakes_are_explained() {
    let err = card(r#"window = "minmax""#).unwrap_err();
    assert!(err.contains("\"min-max\""), "{err}");
    let err = card("window = { center = 40 }").unwrap_err();
    assert!(err.contains("needs both center and width"), "{err}");
    let err = card("window = { file = 1, width = 3 }").unwrap_err();
    assert!(err.contains("takes no center, width or function"), "{err}");
    let err = card("window = { centre = 40, width = 3 }").unwrap_err();
    assert!(err.contains("no key 'centre'"), "{err}");
    let err = card(r#"window = { center = 4, width = 3, function = "gamma" }"#).unwrap_err();
    assert!(err.contains("gamma"), "{err}");
}

#[test]
fn plain_16_bit_images() {
    let values = Array3::from_shape_vec((1, 4, 1), vec![0u16, 100, 300, 65535]).unwrap();
    let (full, _) = apply_plain(&values, &Windowing::FullRange).unwrap();
    assert_eq!(full.as_slice().unwrap(), &[0.0, 100.0 / 65535.0, 300.0 / 65535.0, 1.0]);
    let (mm, _) = apply_plain(&values.slice(ndarray::s![.., 1..3, ..]).to_owned(), &Windowing::MinMax).unwrap();
    assert_eq!(mm.as_slice().unwrap(), &[0.0, 1.0]);
    // LINEAR c = 200, w = 201: ends 200 − 0.5 ∓ 100 = 99.5 and 299.5.
    let fixed = Windowing::Fixed { center: 200.0, width: 201.0, function: VoiFunction::Linear };
    let (out, _) = apply_plain(&values, &fixed).unwrap();
    assert_eq!(out.as_slice().unwrap(), &[0.0, ((100.0 - 199.5) / 200.0 + 0.5) as f32, 1.0, 1.0]);
    let err = apply_plain(&values, &Windowing::File { index: 0 }).unwrap_err().to_string();
    assert!(err.contains("carries no DICOM window"), "{err}");
}

#[test]
fn widths_the_standard_forbids_are_refused() {
    let values = Array3::from_elem((1, 1, 1), 5u16);
    let narrow = Windowing::Fixed { center: 5.0, width: 0.5, function: VoiFunction::Linear };
    let err = apply_plain(&values, &narrow).unwrap_err().to_string();
    assert!(err.contains("C.11.2.1.2.1") && err.contains("0.5"), "{err}");
    let zero = Windowing::Fixed { center: 5.0, width: 0.0, function: VoiFunction::Sigmoid };
    let err = apply_plain(&values, &zero).unwrap_err().to_string();
    assert!(err.contains("C.11.2.1.3"), "{err}");
}
