//! The byte layer of every resumable state file (the PINN's `checkpoint.bin`, the outer
//! loop's `refine.bin`): little-endian fields, floats as bit patterns so a resumed run
//! continues bit for bit, a magic and a format version up front, lengths checked
//! against the bytes left, and the FNV-1a fingerprint that ties a state to its inputs.
//! No file I/O here; errors are plain reasons that the owner of the file words.

/// Appends a `u32`.
pub fn put_u32(w: &mut Vec<u8>, x: u32) {
    w.extend_from_slice(&x.to_le_bytes());
}

/// Appends a `u64`.
pub fn put_u64(w: &mut Vec<u8>, x: u64) {
    w.extend_from_slice(&x.to_le_bytes());
}

/// Appends an `f64` as its bit pattern.
pub fn put_f64(w: &mut Vec<u8>, x: f64) {
    put_u64(w, x.to_bits());
}

/// Appends a length-prefixed vector of `f64`.
pub fn put_f64s(w: &mut Vec<u8>, v: &[f64]) {
    put_u64(w, v.len() as u64);
    for &x in v {
        put_f64(w, x);
    }
}

/// Reads what the `put_*` functions wrote; every failure is a reason in words.
pub struct Reader<'a> {
    b: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    /// A reader at the start of `b`.
    pub fn new(b: &'a [u8]) -> Reader<'a> {
        Reader { b, at: 0 }
    }

    /// Checks the magic bytes and the format version; `what` names the kind of file.
    pub fn header(&mut self, magic: &[u8; 8], version: u32, what: &str) -> Result<(), String> {
        if self.take(8)? != magic {
            return Err(format!("it is not {what}"));
        }
        let ver = self.u32()?;
        if ver != version {
            return Err(format!(
                "format version {ver} of {what}, this build reads {version}"
            ));
        }
        Ok(())
    }

    /// The next `n` bytes.
    pub fn take(&mut self, n: usize) -> Result<&'a [u8], String> {
        if self.b.len() - self.at < n {
            return Err("it ends early (truncated file?)".into());
        }
        let s = &self.b[self.at..self.at + n];
        self.at += n;
        Ok(s)
    }

    /// A `u32`.
    pub fn u32(&mut self) -> Result<u32, String> {
        let mut a = [0u8; 4];
        a.copy_from_slice(self.take(4)?);
        Ok(u32::from_le_bytes(a))
    }

    /// A `u64`.
    pub fn u64(&mut self) -> Result<u64, String> {
        let mut a = [0u8; 8];
        a.copy_from_slice(self.take(8)?);
        Ok(u64::from_le_bytes(a))
    }

    /// An `f64` from its bit pattern.
    pub fn f64(&mut self) -> Result<f64, String> {
        Ok(f64::from_bits(self.u64()?))
    }

    /// A length-prefixed vector of `f64`.
    pub fn f64s(&mut self) -> Result<Vec<f64>, String> {
        let n = self.len(8)?;
        (0..n).map(|_| self.f64()).collect()
    }

    /// A length prefix, checked against the bytes left (`unit` bytes per item).
    pub fn len(&mut self, unit: usize) -> Result<usize, String> {
        let n = self.u64()?;
        let left = (self.b.len() - self.at) as u64;
        if n.saturating_mul(unit as u64) > left {
            return Err("a length exceeds the data".into());
        }
        Ok(n as usize)
    }

    /// Fails when bytes are left over (a damaged length field, or another file).
    pub fn finish(&self) -> Result<(), String> {
        if self.at == self.b.len() {
            Ok(())
        } else {
            Err(format!(
                "{} bytes left over after the last field",
                self.b.len() - self.at
            ))
        }
    }
}

/// FNV-1a (Fowler–Noll–Vo), 64 bits: the fingerprints that tie a state file to the
/// inputs and settings it was made from.
pub struct Fnv(pub u64);

impl Default for Fnv {
    fn default() -> Self {
        Fnv::new()
    }
}

impl Fnv {
    /// The FNV-1a offset basis.
    pub fn new() -> Fnv {
        Fnv(0xcbf2_9ce4_8422_2325)
    }

    /// Folds bytes into the hash.
    pub fn eat(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 ^= b as u64;
            self.0 = self.0.wrapping_mul(0x0100_0000_01b3);
        }
    }

    /// Folds floats (bit patterns) into the hash.
    pub fn eat_f64s(&mut self, xs: &[f64]) {
        for x in xs {
            self.eat(&x.to_bits().to_le_bytes());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_damage_is_named() {
        let mut w = Vec::new();
        w.extend_from_slice(b"SFTESTST");
        put_u32(&mut w, 3);
        put_f64s(&mut w, &[1.5, -0.0, f64::INFINITY]);
        let mut r = Reader::new(&w);
        r.header(b"SFTESTST", 3, "a test state").unwrap();
        let v = r.f64s().unwrap();
        assert_eq!(v[0], 1.5);
        assert!(v[1].is_sign_negative() && v[2].is_infinite());
        r.finish().unwrap();
        let e = Reader::new(&w)
            .header(b"SFTESTST", 4, "a test state")
            .unwrap_err();
        assert!(e.contains("version 3"), "{e}");
        let mut r = Reader::new(&w[..20]);
        r.header(b"SFTESTST", 3, "x").unwrap();
        assert!(r.f64s().unwrap_err().contains("exceeds"));
    }
}
