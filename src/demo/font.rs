//! A tiny 3×5 bitmap font of our own, for the tag Hillmoor's digitiser burns into its images.
//!
//! Each glyph is five rows of three cells, `#` lit. Drawn at an integer scale, so a glyph's
//! pixels are exact and the tag mask can be written from the same cells.

/// Glyph cell width and height (before scaling).
pub const GLYPH_W: usize = 3;
pub const GLYPH_H: usize = 5;

const GLYPHS: &[(char, [&str; 5])] = &[
    ('A', [".#.", "#.#", "###", "#.#", "#.#"]),
    ('B', ["##.", "#.#", "##.", "#.#", "##."]),
    ('C', [".##", "#..", "#..", "#..", ".##"]),
    ('D', ["##.", "#.#", "#.#", "#.#", "##."]),
    ('E', ["###", "#..", "##.", "#..", "###"]),
    ('F', ["###", "#..", "##.", "#..", "#.."]),
    ('G', [".##", "#..", "#.#", "#.#", ".##"]),
    ('H', ["#.#", "#.#", "###", "#.#", "#.#"]),
    ('I', ["###", ".#.", ".#.", ".#.", "###"]),
    ('J', ["..#", "..#", "..#", "#.#", ".#."]),
    ('K', ["#.#", "#.#", "##.", "#.#", "#.#"]),
    ('L', ["#..", "#..", "#..", "#..", "###"]),
    ('M', ["#.#", "###", "###", "#.#", "#.#"]),
    ('N', ["##.", "#.#", "#.#", "#.#", "#.#"]),
    ('O', [".#.", "#.#", "#.#", "#.#", ".#."]),
    ('P', ["##.", "#.#", "##.", "#..", "#.."]),
    ('Q', [".#.", "#.#", "#.#", "##.", ".##"]),
    ('R', ["##.", "#.#", "##.", "#.#", "#.#"]),
    ('S', [".##", "#..", ".#.", "..#", "##."]),
    ('T', ["###", ".#.", ".#.", ".#.", ".#."]),
    ('U', ["#.#", "#.#", "#.#", "#.#", "###"]),
    ('V', ["#.#", "#.#", "#.#", "#.#", ".#."]),
    ('W', ["#.#", "#.#", "###", "###", "#.#"]),
    ('X', ["#.#", "#.#", ".#.", "#.#", "#.#"]),
    ('Y', ["#.#", "#.#", ".#.", ".#.", ".#."]),
    ('Z', ["###", "..#", ".#.", "#..", "###"]),
    ('0', ["###", "#.#", "#.#", "#.#", "###"]),
    ('1', [".#.", "##.", ".#.", ".#.", "###"]),
    ('2', ["##.", "..#", ".#.", "#..", "###"]),
    ('3', ["##.", "..#", ".#.", "..#", "##."]),
    ('4', ["#.#", "#.#", "###", "..#", "..#"]),
    ('5', ["###", "#..", "##.", "..#", "##."]),
    ('6', [".##", "#..", "###", "#.#", "###"]),
    ('7', ["###", "..#", ".#.", ".#.", ".#."]),
    ('8', ["###", "#.#", "###", "#.#", "###"]),
    ('9', ["###", "#.#", "###", "..#", "##."]),
    ('-', ["...", "...", "###", "...", "..."]),
    (' ', ["...", "...", "...", "...", "..."]),
];

fn glyph(c: char) -> &'static [&'static str; 5] {
    let c = c.to_ascii_uppercase();
    GLYPHS.iter().find(|(g, _)| *g == c).map(|(_, rows)| rows).unwrap_or(&GLYPHS[GLYPHS.len() - 1].1)
}

/// Width in pixels of `text` at `scale` (one empty cell between glyphs).
pub fn tag_width(text: &str, scale: usize) -> usize {
    let n = text.chars().count();
    if n == 0 { 0 } else { (n * (GLYPH_W + 1) - 1) * scale }
}

/// Height in pixels of one line at `scale`.
pub fn tag_height(scale: usize) -> usize {
    GLYPH_H * scale
}

/// Calls `lit(x, y)` for every lit pixel of `text` drawn with its top-left at (`x0`, `y0`).
/// Unknown characters draw as a blank.
pub fn for_each_lit(text: &str, x0: usize, y0: usize, scale: usize, mut lit: impl FnMut(usize, usize)) {
    for (i, c) in text.chars().enumerate() {
        let gx = x0 + i * (GLYPH_W + 1) * scale;
        for (row, cells) in glyph(c).iter().enumerate() {
            for (col, cell) in cells.bytes().enumerate() {
                if cell != b'#' {
                    continue;
                }
                for dy in 0..scale {
                    for dx in 0..scale {
                        lit(gx + col * scale + dx, y0 + row * scale + dy);
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_glyph_is_three_by_five_and_distinct() {
        for (c, rows) in GLYPHS {
            assert!(rows.iter().all(|r| r.len() == GLYPH_W && r.bytes().all(|b| b == b'#' || b == b'.')), "{c}");
        }
        for (i, (a, ra)) in GLYPHS.iter().enumerate() {
            for (b, rb) in &GLYPHS[i + 1..] {
                assert!(ra != rb, "{a} and {b} look the same");
            }
        }
    }

    #[test]
    fn lit_pixels_count_cells_times_scale_squared() {
        let mut n = 0;
        for_each_lit("HM", 0, 0, 2, |_, _| n += 1);
        // H has 11 lit cells, M has 12.
        assert_eq!(n, (11 + 12) * 4);
        assert_eq!(tag_width("HM L", 2), (4 * 4 - 1) * 2);
    }
}
