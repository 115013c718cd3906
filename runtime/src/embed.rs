//! Getting model bytes to 8-byte alignment, which `Model::parse` requires:
//! `Aligned` + `embed_model!` for firmware that embeds a file at build time,
//! and (with `std`) `AlignedBytes`, an owned aligned buffer for host code.

/// `T` placed at an 8-byte aligned address. `Aligned<[u8; N]>` coerces to
/// `Aligned<[u8]>`, so one type serves every file size.
#[repr(C, align(8))]
pub struct Aligned<T: ?Sized> {
    pub bytes: T,
}

/// Embeds the file at `$path` (as `include_bytes!` resolves it) at an
/// 8-byte aligned address and evaluates to its `&'static [u8]`.
///
/// ```
/// // Usually a path relative to the source file: embed_model!("../model.midge").
/// static MODEL: &[u8] = midge_runtime::embed_model!(concat!(
///     env!("CARGO_MANIFEST_DIR"),
///     "/fixtures/digits.midge"
/// ));
/// assert_eq!(MODEL.as_ptr() as usize % 8, 0);
/// assert!(midge_runtime::Model::parse(MODEL).is_ok());
/// ```
#[macro_export]
macro_rules! embed_model {
    ($path:expr) => {{
        static ALIGNED: &$crate::embed::Aligned<[u8]> = &$crate::embed::Aligned {
            bytes: *include_bytes!($path),
        };
        &ALIGNED.bytes
    }};
}

#[cfg(feature = "std")]
pub use owned::AlignedBytes;

#[cfg(feature = "std")]
mod owned {
    use std::vec;
    use std::vec::Vec;

    /// Owned bytes starting at an 8-byte aligned address: a model file read
    /// from disk, or a workspace for `Model::run`.
    #[derive(Clone, Debug, PartialEq, Eq)]
    pub struct AlignedBytes {
        words: Vec<u64>,
        len: usize,
    }

    impl AlignedBytes {
        /// `len` zero bytes.
        pub fn zeroed(len: usize) -> Self {
            AlignedBytes {
                words: vec![0u64; len.div_ceil(8)],
                len,
            }
        }

        /// An aligned copy of `bytes`.
        pub fn from_slice(bytes: &[u8]) -> Self {
            let mut a = Self::zeroed(bytes.len());
            a.as_mut().copy_from_slice(bytes);
            a
        }
    }

    impl core::ops::Deref for AlignedBytes {
        type Target = [u8];
        fn deref(&self) -> &[u8] {
            let all: &[u8] = bytemuck::cast_slice(&self.words);
            all.get(..self.len).unwrap_or(&[])
        }
    }

    impl core::ops::DerefMut for AlignedBytes {
        fn deref_mut(&mut self) -> &mut [u8] {
            let all: &mut [u8] = bytemuck::cast_slice_mut(&mut self.words);
            all.get_mut(..self.len).unwrap_or(&mut [])
        }
    }

    impl AsRef<[u8]> for AlignedBytes {
        fn as_ref(&self) -> &[u8] {
            self
        }
    }

    impl AsMut<[u8]> for AlignedBytes {
        fn as_mut(&mut self) -> &mut [u8] {
            self
        }
    }
}
