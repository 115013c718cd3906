//! Compile-time op sets: which (op, output precision) pairs a build links.
//! `Model<'a, OPS>` carries one as a const bitmask; `parse` refuses a layer
//! outside it, and the dispatch arms of absent pairs are dead code the compiler drops.

use crate::repr::{ElemType, Op};

/// A set of (op, output element type) pairs as a bitmask: bit
/// `2·(op − 1) + (elem − 1)` for the op codes 1..=N (`Op::ALL`) and the output types
/// int8 (1) and fp16 (2). The output type names the precision of every op
/// (pixels → int8 or fp16; quantize writes int8, dequantize fp16).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct OpSet(u32);

/// Every op in both precisions: what `Model::parse` links.
pub const ALL_OPS: u32 = OpSet::ALL.bits();

/// The bit layout needs the op codes to be 1..=N in `Op::ALL` order.
const _: () = {
    let mut i = 0;
    while i < Op::ALL.len() {
        assert!(
            Op::ALL[i] as usize == i + 1,
            "op codes must be 1..=N in order"
        );
        i += 1;
    }
    assert!(2 * Op::ALL.len() <= 32, "op set bitmask is a u32");
};

impl OpSet {
    pub const EMPTY: OpSet = OpSet(0);
    /// Every pair (some, like quantize → fp16, no layer can have).
    pub const ALL: OpSet = OpSet(((1u64 << (2 * Op::ALL.len())) - 1) as u32);

    /// The bit of `(op, elem)`; `None` for a u8 output, which no layer has.
    const fn bit(op: Op, elem: ElemType) -> Option<u32> {
        match elem {
            ElemType::U8 => None,
            ElemType::I8 | ElemType::F16 => Some(1 << (2 * (op as u32 - 1) + (elem as u32 - 1))),
        }
    }

    /// The set from its bitmask (bits past the twenty pairs are ignored).
    pub const fn from_bits(bits: u32) -> OpSet {
        OpSet(bits & OpSet::ALL.0)
    }

    pub const fn bits(self) -> u32 {
        self.0
    }

    /// This set plus `(op, elem)` (unchanged for a u8 `elem`).
    pub const fn with(self, op: Op, elem: ElemType) -> OpSet {
        match OpSet::bit(op, elem) {
            Some(b) => OpSet(self.0 | b),
            None => self,
        }
    }

    /// Whether `(op, elem)` is in the set.
    pub const fn has(self, op: Op, elem: ElemType) -> bool {
        match OpSet::bit(op, elem) {
            Some(b) => self.0 & b != 0,
            None => false,
        }
    }

    /// Whether `op` is in the set in either precision.
    pub const fn has_op(self, op: Op) -> bool {
        self.has(op, ElemType::I8) || self.has(op, ElemType::F16)
    }

    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }

    /// Whether every pair of `other` is in this set.
    pub const fn contains(self, other: OpSet) -> bool {
        other.0 & !self.0 == 0
    }

    /// The pairs in op-code order, int8 before fp16.
    pub fn iter(self) -> impl Iterator<Item = (Op, ElemType)> {
        Op::ALL
            .iter()
            .flat_map(|&op| [(op, ElemType::I8), (op, ElemType::F16)])
            .filter(move |&(op, e)| self.has(op, e))
    }
}

/// Whether the build with op set `OPS` links `(op, elem)`; evaluated at
/// compile time where `op` and `elem` are constants.
#[inline(always)]
pub(crate) const fn linked<const OPS: u32>(op: Op, elem: ElemType) -> bool {
    OpSet::from_bits(OPS).has(op, elem)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bits_are_distinct_and_cover_all() {
        let mut seen = 0u32;
        for &op in Op::ALL {
            for e in [ElemType::I8, ElemType::F16] {
                let b = OpSet::EMPTY.with(op, e).bits();
                assert_eq!(b.count_ones(), 1, "{op:?} {e:?}");
                assert_eq!(seen & b, 0, "{op:?} {e:?} collides");
                seen |= b;
            }
            assert!(!OpSet::ALL.has(op, ElemType::U8));
        }
        assert_eq!(seen, OpSet::ALL.bits());
        assert_eq!(OpSet::ALL.iter().count(), 20);
    }

    #[test]
    fn membership() {
        let s = OpSet::EMPTY
            .with(Op::Conv2d, ElemType::I8)
            .with(Op::Dense, ElemType::F16)
            .with(Op::Pixels, ElemType::U8);
        assert!(s.has(Op::Conv2d, ElemType::I8) && !s.has(Op::Conv2d, ElemType::F16));
        assert!(s.has_op(Op::Dense) && !s.has_op(Op::Pixels));
        assert!(s
            .iter()
            .eq([(Op::Conv2d, ElemType::I8), (Op::Dense, ElemType::F16)]));
        assert!(OpSet::ALL.contains(s) && !s.contains(OpSet::ALL));
        assert_eq!(OpSet::from_bits(u32::MAX), OpSet::ALL);
        assert!(linked::<ALL_OPS>(Op::Add, ElemType::F16));
        assert!(!linked::<0>(Op::Add, ElemType::F16));
    }
}
