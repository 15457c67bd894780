//! A warning for a picture much smaller than the model's input: stretched to the model's grid,
//! a handful of pixels becomes a blur the model hardly saw in training.

use super::FeedCard;

/// How many times larger than the picture the model's grid may be, per axis, before
/// [`enlargement_warning`] speaks. Our choice: beyond it every picture pixel becomes a block of
/// more than 4×4 model pixels.
pub const MAX_ENLARGEMENT: usize = 4;

/// A warning when a picture of `h`×`w` is enlarged more than [`MAX_ENLARGEMENT`] times along
/// an axis to the model's grid (a 1×1 PNG stretched to 128×128, a thumbnail opened by mistake);
/// `None` otherwise.
pub fn enlargement_warning(card: &FeedCard, h: usize, w: usize) -> Option<String> {
    let (th, tw) = (card.input.height, card.input.width);
    (th > MAX_ENLARGEMENT * h.max(1) || tw > MAX_ENLARGEMENT * w.max(1)).then(|| {
        format!(
            "the image is only {w}×{h} pixels and is enlarged to the model's {tw}×{th}: the model reads a blur of a few \
             pixels, so the reading says little about the image. Check that this is the image you meant (not a thumbnail \
             or a placeholder)."
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_tiny_picture_enlarged_to_the_model_is_warned_of() {
        let c: FeedCard = toml::from_str("[input]\nheight = 128\nwidth = 128\n").unwrap();
        let w = enlargement_warning(&c, 1, 1).expect("1×1 to 128×128 must warn");
        assert!(w.contains("1×1") && w.contains("128×128"), "{w}");
        assert!(enlargement_warning(&c, 20, 200).is_some(), "one axis enlarged 6.4× is enough");
        assert!(enlargement_warning(&c, 32, 32).is_none(), "4× is still allowed");
        assert!(enlargement_warning(&c, 256, 256).is_none());
    }
}
