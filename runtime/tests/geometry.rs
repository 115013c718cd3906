//! Output sizes of sliding windows (runtime/src/geometry.rs) against the
//! relationships and figure examples of Dumoulin & Visin, "A guide to
//! convolution arithmetic for deep learning" (2016, arXiv:1603.07285).
//! Figure numbers and parameters are recalled from memory of the paper;
//! every expected size is also re-derived from the relationship it names.

use midge_runtime::geometry::output_len;
use midge_runtime::repr::{Padding, Window};

fn win(k: u16, s: u16, d: u16, p: u16) -> Window {
    Window::new((k, k), (s, s), (d, d), [p; 4])
}

#[test]
fn no_padding_unit_strides() {
    // Dumoulin & Visin relationship 1: o = (i − k) + 1.
    // Figure 2.1 (from memory): i = 4, k = 3, s = 1, p = 0 → o = 2.
    assert_eq!(win(3, 1, 1, 0).output_hw(4, 4), Some((2, 2)));
    // Common practice: a 3×3 filter on a 5×5 input, unit stride, no padding → 3×3.
    assert_eq!(win(3, 1, 1, 0).output_hw(5, 5), Some((3, 3)));
}

#[test]
fn zero_padding_unit_strides() {
    // Relationship 2: o = (i − k) + 2p + 1.
    // Figure 2.2 (from memory): i = 5, k = 4, p = 2 → o = 6.
    assert_eq!(win(4, 1, 1, 2).output_hw(5, 5), Some((6, 6)));
}

#[test]
fn half_padding() {
    // Relationship 3 (half / same padding, k odd, p = ⌊k/2⌋, s = 1): o = i.
    // Figure 2.3 (from memory): i = 5, k = 3, p = 1 → o = 5.
    assert_eq!(win(3, 1, 1, 1).output_hw(5, 5), Some((5, 5)));
    for k in [1u16, 3, 5, 7] {
        for i in [k, 9, 28] {
            assert_eq!(output_len(i, k, 1, 1, k / 2, k / 2), Some(i), "k={k} i={i}");
        }
    }
    // The `Same` resolution must give the same explicit padding here.
    let w = Padding::Same.resolve((5, 5), (3, 3), (1, 1), (1, 1));
    assert_eq!(
        (w.pad_top, w.pad_left, w.pad_bottom, w.pad_right),
        (1, 1, 1, 1)
    );
}

#[test]
fn full_padding() {
    // Relationship 4 (full padding, p = k − 1, s = 1): o = i + (k − 1).
    // Figure 2.4 (from memory): i = 5, k = 3, p = 2 → o = 7.
    assert_eq!(win(3, 1, 1, 2).output_hw(5, 5), Some((7, 7)));
}

#[test]
fn strides() {
    // Relationship 5 (no padding, stride s): o = ⌊(i − k)/s⌋ + 1.
    // Figure 2.5 (from memory): i = 5, k = 3, s = 2 → o = 2.
    assert_eq!(win(3, 2, 1, 0).output_hw(5, 5), Some((2, 2)));
    // Relationship 6 (padding and strides): o = ⌊(i + 2p − k)/s⌋ + 1.
    // Figure 2.6 (from memory): i = 5, k = 3, s = 2, p = 1 → o = 3.
    assert_eq!(win(3, 2, 1, 1).output_hw(5, 5), Some((3, 3)));
    // Figure 2.7 (from memory, the odd case): i = 6, k = 3, s = 2, p = 1 → o = 3;
    // the last row/column of padding is never reached.
    assert_eq!(win(3, 2, 1, 1).output_hw(6, 6), Some((3, 3)));
}

#[test]
fn pooling() {
    // Relationship 7 (pooling): o = ⌊(i − k)/s⌋ + 1.
    // Common practice: 2×2 max pooling with stride 2 halves each dimension.
    for i in [2u16, 4, 8, 28, 96] {
        assert_eq!(win(2, 2, 1, 0).output_hw(i, i), Some((i / 2, i / 2)));
    }
    // Odd sizes floor: 7 → 3.
    assert_eq!(win(2, 2, 1, 0).output_hw(7, 7), Some((3, 3)));
    // Figure 1.6 style (from memory): 3×3 pooling, unit stride, on 5×5 → 3×3.
    assert_eq!(win(3, 1, 1, 0).output_hw(5, 5), Some((3, 3)));
}

#[test]
fn dilation() {
    // Relationship 15 (dilated): o = ⌊(i + 2p − k − (k − 1)(d − 1))/s⌋ + 1.
    // Figure 5.1 (from memory): i = 7, k = 3, d = 2, s = 1, p = 0 → o = 3.
    assert_eq!(win(3, 1, 2, 0).output_hw(7, 7), Some((3, 3)));
    // The effective kernel size is k + (k − 1)(d − 1): 3 with d = 3 spans 7.
    assert_eq!(output_len(7, 3, 1, 3, 0, 0), Some(1));
    assert_eq!(output_len(6, 3, 1, 3, 0, 0), None);
}

#[test]
fn relationship_15_over_a_grid() {
    // Relationship 15 evaluated independently (i64, signed) against output_len
    // for every small parameter combination; relationships 1–6 are its special cases.
    for i in 1u16..=12 {
        for k in 1u16..=5 {
            for s in 1u16..=3 {
                for d in 1u16..=3 {
                    for p in 0u16..=3 {
                        let num =
                            i as i64 + 2 * p as i64 - k as i64 - (k as i64 - 1) * (d as i64 - 1);
                        let expect = if num < 0 {
                            None
                        } else {
                            Some((num / s as i64 + 1) as u16)
                        };
                        assert_eq!(
                            output_len(i, k, s, d, p, p),
                            expect,
                            "i={i} k={k} s={s} d={d} p={p}"
                        );
                    }
                }
            }
        }
    }
}

#[test]
fn same_padding_gives_ceil() {
    // Common practice: "same" padding gives o = ⌈i/s⌉, extra padding at the bottom/right.
    for i in 1u16..=20 {
        for k in 1u16..=5 {
            for s in 1u16..=3 {
                let w = Padding::Same.resolve((i, i), (k, k), (s, s), (1, 1));
                let (oh, ow) = w.output_hw(i, i).expect("same padding always fits");
                assert_eq!(
                    (oh, ow),
                    (i.div_ceil(s), i.div_ceil(s)),
                    "i={i} k={k} s={s}"
                );
                assert!(w.pad_bottom >= w.pad_top && w.pad_bottom - w.pad_top <= 1);
            }
        }
    }
}

#[test]
fn degenerate_windows() {
    assert_eq!(output_len(5, 0, 1, 1, 0, 0), None);
    assert_eq!(output_len(5, 3, 0, 1, 0, 0), None);
    assert_eq!(output_len(5, 3, 1, 0, 0, 0), None);
    assert_eq!(output_len(0, 1, 1, 1, 0, 0), None);
    assert_eq!(output_len(2, 3, 1, 1, 0, 0), None);
}
