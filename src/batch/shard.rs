//! Shards: a stable hash of each cell's relative path splits an archive into K shares.

use super::BatchError;

/// A 64-bit hash of `text` that never changes: [`fnv1a64`] over the UTF-8 bytes, then
/// [`fmix64`], because FNV-1a's low bits alone depend on few input bits and the shard is taken
/// modulo K.
pub fn stable_hash(text: &str) -> u64 {
    fmix64(fnv1a64(text.as_bytes()))
}

/// FNV-1a 64 (Fowler, Noll & Vo): offset basis 0xcbf29ce484222325, prime 0x100000001b3; each
/// byte is xored in, then the state is multiplied by the prime.
pub fn fnv1a64(bytes: &[u8]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for &b in bytes {
        h ^= b as u64;
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    h
}

/// The 64-bit finaliser of MurmurHash3 (`fmix64`, Appleby): xor-shift 33, multiply, xor-shift
/// 33, multiply, xor-shift 33. A bijection on u64.
pub fn fmix64(mut h: u64) -> u64 {
    h ^= h >> 33;
    h = h.wrapping_mul(0xff51_afd7_ed55_8ccd);
    h ^= h >> 33;
    h = h.wrapping_mul(0xc4ce_b9fe_1a85_ec53);
    h ^= h >> 33;
    h
}

/// One share of an archive: shard `index` (1-based) of `count`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: u32,
    pub count: u32,
}

impl Shard {
    /// The whole archive (1/1).
    pub const ALL: Shard = Shard { index: 1, count: 1 };

    /// Does the cell at relative path `rel` belong to this shard?
    pub fn contains(&self, rel: &str) -> bool {
        self.count <= 1 || stable_hash(rel) % self.count as u64 == (self.index - 1) as u64
    }

    /// File-name part of this shard's summary files: `summary` or `summary.shard-I-of-K`.
    pub fn summary_stem(&self) -> String {
        if self.count <= 1 {
            "summary".to_string()
        } else {
            format!("summary.shard-{}-of-{}", self.index, self.count)
        }
    }
}

impl std::str::FromStr for Shard {
    type Err = BatchError;
    fn from_str(s: &str) -> Result<Shard, BatchError> {
        let bad = || BatchError::BadShard(s.to_string());
        let (i, k) = s.split_once('/').ok_or_else(bad)?;
        let index: u32 = i.trim().parse().map_err(|_| bad())?;
        let count: u32 = k.trim().parse().map_err(|_| bad())?;
        if index == 0 || count == 0 || index > count {
            return Err(bad());
        }
        Ok(Shard { index, count })
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fnv1a_matches_the_published_test_vectors() {
        // FNV-1a 64 test vectors from the authors' published table (Fowler, Noll & Vo)
        assert_eq!(fnv1a64(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv1a64(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv1a64(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn fmix64_matches_values_computed_independently() {
        // MurmurHash3's fmix64 evaluated in Python with arbitrary-precision integers masked to
        // 64 bits (an independent implementation): 0 is a fixed point
        assert_eq!(fmix64(0), 0);
        assert_eq!(fmix64(1), 0xb456_bcfc_34c2_cb2c);
        assert_eq!(fmix64(0xcbf2_9ce4_8422_2325), 0xefd0_1f60_ba99_2926);
        // the whole hash of one archive path, by the same Python script: a shard split that
        // changed between versions would move cells between shards
        assert_eq!(stable_hash("cells/cell_00001.swc"), 0xb783_ecd0_6c6d_8a13);
    }

    #[test]
    fn shard_parsing_and_split() {
        assert_eq!(
            "2/5".parse::<Shard>().unwrap(),
            Shard { index: 2, count: 5 }
        );
        for bad in ["0/3", "4/3", "1/0", "x/2", "3", "1/2/3", ""] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
        // every name lands in exactly one of K shards, and the shares are roughly even
        let k = 4;
        let mut sizes = [0usize; 4];
        for n in 0..4000 {
            let name = format!("cells/cell_{n:05}.swc");
            let owners: Vec<u32> = (1..=k)
                .filter(|&i| Shard { index: i, count: k }.contains(&name))
                .collect();
            assert_eq!(owners.len(), 1);
            sizes[owners[0] as usize - 1] += 1;
        }
        for s in sizes {
            assert!((850..=1150).contains(&s), "{sizes:?}");
        }
    }
}
