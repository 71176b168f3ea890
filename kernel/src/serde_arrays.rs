//! Serde for arrays of a const-generic length (serde's own impls stop at
//! 32 elements and are not generic). An `[T; N]` is a tuple of `N`
//! elements, so postcard writes the elements back to back with no length
//! prefix; `[[T; N]; M]` is `M` such tuples. Use with `#[serde(with = …)]`.

use core::fmt;
use core::marker::PhantomData;

use serde::de::{Deserializer, Error as _, SeqAccess, Visitor};
use serde::ser::{SerializeTuple, Serializer};
use serde::{Deserialize, Serialize};

/// Serialise `[T; N]` as an `N`-tuple.
pub(crate) fn serialize<T: Serialize, Se: Serializer, const N: usize>(
    a: &[T; N],
    s: Se,
) -> Result<Se::Ok, Se::Error> {
    let mut t = s.serialize_tuple(N)?;
    for x in a {
        t.serialize_element(x)?;
    }
    t.end()
}

struct ArrayVisitor<T, const N: usize>(PhantomData<T>);

impl<'de, T: Deserialize<'de> + Copy + Default, const N: usize> Visitor<'de>
    for ArrayVisitor<T, N>
{
    type Value = [T; N];

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "an array of {N} elements")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<[T; N], A::Error> {
        let mut out = [T::default(); N];
        for (i, o) in out.iter_mut().enumerate() {
            *o = seq
                .next_element()?
                .ok_or_else(|| A::Error::invalid_length(i, &self))?;
        }
        Ok(out)
    }
}

/// Deserialise an `N`-tuple into `[T; N]`.
pub(crate) fn deserialize<'de, T, De, const N: usize>(d: De) -> Result<[T; N], De::Error>
where
    T: Deserialize<'de> + Copy + Default,
    De: Deserializer<'de>,
{
    d.deserialize_tuple(N, ArrayVisitor::<T, N>(PhantomData))
}

/// Serde for `[[T; N]; M]` (a matrix, row by row).
pub(crate) mod matrix {
    use super::*;

    /// A row, deserialised from an `N`-tuple.
    #[derive(Clone, Copy)]
    struct Row<T, const N: usize>([T; N]);

    impl<T: Copy + Default, const N: usize> Default for Row<T, N> {
        fn default() -> Self {
            Self([T::default(); N])
        }
    }

    impl<'de, T: Deserialize<'de> + Copy + Default, const N: usize> Deserialize<'de> for Row<T, N> {
        fn deserialize<De: Deserializer<'de>>(d: De) -> Result<Self, De::Error> {
            super::deserialize(d).map(Row)
        }
    }

    /// A borrowed row, for serialising.
    struct RowRef<'a, T, const N: usize>(&'a [T; N]);

    impl<T: Serialize, const N: usize> Serialize for RowRef<'_, T, N> {
        fn serialize<Se: Serializer>(&self, s: Se) -> Result<Se::Ok, Se::Error> {
            super::serialize(self.0, s)
        }
    }

    /// Serialise `[[T; N]; M]` as `M` tuples of `N`.
    pub(crate) fn serialize<T: Serialize, Se: Serializer, const N: usize, const M: usize>(
        a: &[[T; N]; M],
        s: Se,
    ) -> Result<Se::Ok, Se::Error> {
        let mut t = s.serialize_tuple(M)?;
        for row in a {
            t.serialize_element(&RowRef(row))?;
        }
        t.end()
    }

    /// Deserialise `M` tuples of `N` into `[[T; N]; M]`.
    pub(crate) fn deserialize<'de, T, De, const N: usize, const M: usize>(
        d: De,
    ) -> Result<[[T; N]; M], De::Error>
    where
        T: Deserialize<'de> + Copy + Default,
        De: Deserializer<'de>,
    {
        let rows: [Row<T, N>; M] = super::deserialize(d)?;
        let mut out = [[T::default(); N]; M];
        for (o, r) in out.iter_mut().zip(rows.iter()) {
            *o = r.0;
        }
        Ok(out)
    }
}
