//! The particle store: structure of arrays, N coordinates per signed particle.
//!
//! A signed particle is one point z = (x_1..x_N, k_1..k_N) of the N-body phase space with a
//! sign s = ±1 and a 64-bit identity (error group in its top bits). Nothing else is stored:
//! random streams derive from the identity. For N = 2 that is 2·16 + 8 + 1 = 41 bytes.

/// Signed particles, N coordinates each: `x[p*n + i]`, `k[p*n + i]` for particle p.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Store {
    pub n: usize,
    pub x: Vec<f64>,
    pub k: Vec<f64>,
    pub id: Vec<u64>,
    pub sign: Vec<i8>,
}

impl Store {
    pub fn new(n: usize) -> Self {
        Store {
            n,
            ..Default::default()
        }
    }

    pub fn with_capacity(n: usize, cap: usize) -> Self {
        Store {
            n,
            x: Vec::with_capacity(cap * n),
            k: Vec::with_capacity(cap * n),
            id: Vec::with_capacity(cap),
            sign: Vec::with_capacity(cap),
        }
    }

    /// Room for `extra` more particles.
    pub fn reserve(&mut self, extra: usize) {
        self.x.reserve(extra * self.n);
        self.k.reserve(extra * self.n);
        self.id.reserve(extra);
        self.sign.reserve(extra);
    }

    pub fn len(&self) -> usize {
        self.id.len()
    }

    /// Particles the store holds without reallocating (the least over its vectors).
    pub fn capacity(&self) -> usize {
        let n = self.n.max(1);
        (self.x.capacity() / n)
            .min(self.k.capacity() / n)
            .min(self.id.capacity())
            .min(self.sign.capacity())
    }

    pub fn is_empty(&self) -> bool {
        self.id.is_empty()
    }

    #[inline]
    pub fn push(&mut self, x: &[f64], k: &[f64], id: u64, sign: i8) {
        debug_assert_eq!(x.len(), self.n);
        debug_assert_eq!(k.len(), self.n);
        // Element by element: for a few coordinates this beats a call to memcpy.
        for (&xi, &ki) in x.iter().zip(k) {
            self.x.push(xi);
            self.k.push(ki);
        }
        self.id.push(id);
        self.sign.push(sign);
    }

    /// Coordinates of particle p.
    #[inline]
    pub fn xs(&self, p: usize) -> &[f64] {
        &self.x[p * self.n..(p + 1) * self.n]
    }
    #[inline]
    pub fn ks(&self, p: usize) -> &[f64] {
        &self.k[p * self.n..(p + 1) * self.n]
    }

    pub fn append(&mut self, other: &mut Store) {
        self.x.append(&mut other.x);
        self.k.append(&mut other.k);
        self.id.append(&mut other.id);
        self.sign.append(&mut other.sign);
    }

    /// Keep the particles whose flag is true (order preserved).
    pub fn retain(&mut self, keep: &[bool]) {
        let n = self.n;
        // The first dropped particle: everything before it stays where it is.
        let Some(first) = keep.iter().position(|&kp| !kp) else {
            return;
        };
        let mut w = first;
        for (r, &kp) in keep.iter().enumerate().skip(first + 1) {
            if kp {
                // Element by element: for a few coordinates this beats a call to memmove.
                for i in 0..n {
                    self.x[w * n + i] = self.x[r * n + i];
                    self.k[w * n + i] = self.k[r * n + i];
                }
                self.id[w] = self.id[r];
                self.sign[w] = self.sign[r];
                w += 1;
            }
        }
        self.truncate(w);
    }

    pub fn truncate(&mut self, len: usize) {
        self.x.truncate(len * self.n);
        self.k.truncate(len * self.n);
        self.id.truncate(len);
        self.sign.truncate(len);
    }

    /// Bytes per particle held by the store: 16 N + 9.
    pub fn bytes_per_particle(n: usize) -> usize {
        16 * n + 8 + 1
    }

    /// Serialise particles [from, to) into 64-bit words: id, sign, x.., k.. (for transfer).
    pub fn pack(&self, from: usize, to: usize, out: &mut Vec<u64>) {
        for p in from..to {
            out.push(self.id[p]);
            out.push(self.sign[p] as i64 as u64);
            out.extend(self.xs(p).iter().map(|v| v.to_bits()));
            out.extend(self.ks(p).iter().map(|v| v.to_bits()));
        }
    }

    /// Append particles serialised by [`Store::pack`].
    pub fn unpack(&mut self, words: &[u64]) {
        let n = self.n;
        for rec in words.chunks_exact(2 + 2 * n) {
            self.id.push(rec[0]);
            self.sign.push(rec[1] as i64 as i8);
            self.x
                .extend(rec[2..2 + n].iter().map(|&b| f64::from_bits(b)));
            self.k
                .extend(rec[2 + n..].iter().map(|&b| f64::from_bits(b)));
        }
    }

    /// Net sign Σ s.
    pub fn net_sign(&self) -> i64 {
        self.sign.iter().map(|&s| s as i64).sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pack_roundtrip_and_retain() {
        let mut s = Store::new(2);
        s.push(&[1.0, 2.0], &[0.1, 0.2], 5, 1);
        s.push(&[3.0, 4.0], &[0.3, 0.4], 6, -1);
        s.push(&[5.0, 6.0], &[0.5, 0.6], 7, 1);
        let mut w = Vec::new();
        s.pack(0, 3, &mut w);
        let mut t = Store::new(2);
        t.unpack(&w);
        assert_eq!(s, t);
        t.retain(&[true, false, true]);
        assert_eq!(t.id, vec![5, 7]);
        assert_eq!(t.xs(1), &[5.0, 6.0]);
        assert_eq!(t.net_sign(), 2);
    }
}
