//! Convolution arithmetic: output sizes of sliding windows and the
//! resolution of valid/same padding into explicit padding. One place for
//! both, used by `parse` to validate shapes and by the converter to plan them.

use crate::repr::{Padding, Window};

/// Output length along one axis: floor((in + pad_lo + pad_hi − dil·(k−1) − 1) / stride) + 1,
/// or `None` when the dilated kernel does not fit or a parameter is zero.
/// (Dumoulin & Visin, "A guide to convolution arithmetic for deep learning", 2016, relationship 15.)
pub fn output_len(
    input: u16,
    k: u16,
    stride: u16,
    dil: u16,
    pad_lo: u16,
    pad_hi: u16,
) -> Option<u16> {
    if k == 0 || stride == 0 || dil == 0 || input == 0 {
        return None;
    }
    let padded = input as u32 + pad_lo as u32 + pad_hi as u32;
    let span = dil as u32 * (k as u32 - 1) + 1;
    if span > padded {
        return None;
    }
    let out = (padded - span) / stride as u32 + 1;
    u16::try_from(out).ok()
}

impl Window {
    /// A window from (height, width) pairs of kernel size, stride and
    /// dilation, and padding `[top, left, bottom, right]`.
    pub const fn new(k: (u16, u16), stride: (u16, u16), dil: (u16, u16), pad: [u16; 4]) -> Self {
        Window {
            kh: k.0,
            kw: k.1,
            stride_h: stride.0,
            stride_w: stride.1,
            dil_h: dil.0,
            dil_w: dil.1,
            pad_top: pad[0],
            pad_left: pad[1],
            pad_bottom: pad[2],
            pad_right: pad[3],
        }
    }

    /// Output (height, width) for an input of `in_h`×`in_w`, or `None` when
    /// the window is degenerate or larger than the padded input.
    pub fn output_hw(&self, in_h: u16, in_w: u16) -> Option<(u16, u16)> {
        let oh = output_len(
            in_h,
            self.kh,
            self.stride_h,
            self.dil_h,
            self.pad_top,
            self.pad_bottom,
        )?;
        let ow = output_len(
            in_w,
            self.kw,
            self.stride_w,
            self.dil_w,
            self.pad_left,
            self.pad_right,
        )?;
        Some((oh, ow))
    }
}

impl Padding {
    /// Explicit window for kernel `k`, `stride`, `dil` (each (h, w)) on an
    /// `in_h`×`in_w` input. `Same` gives output ceil(in / stride) and puts
    /// the odd padding element at the bottom/right (common practice).
    pub fn resolve(
        self,
        in_hw: (u16, u16),
        k: (u16, u16),
        stride: (u16, u16),
        dil: (u16, u16),
    ) -> Window {
        let pad = match self {
            Padding::Valid => [0; 4],
            Padding::Explicit(p) => p,
            Padding::Same => {
                let (t, b) = same_pad(in_hw.0, k.0, stride.0, dil.0);
                let (l, r) = same_pad(in_hw.1, k.1, stride.1, dil.1);
                [t, l, b, r]
            }
        };
        Window::new(k, stride, dil, pad)
    }
}

/// (low, high) padding for "same" along one axis.
fn same_pad(input: u16, k: u16, stride: u16, dil: u16) -> (u16, u16) {
    let stride = stride.max(1) as u32;
    let input = input as u32;
    let out = input.div_ceil(stride);
    let span = dil.max(1) as u32 * (k.max(1) as u32 - 1) + 1;
    let needed = ((out.saturating_sub(1)) * stride + span).saturating_sub(input);
    let lo = needed / 2;
    let hi = needed - lo;
    (
        lo.min(u16::MAX as u32) as u16,
        hi.min(u16::MAX as u32) as u16,
    )
}
