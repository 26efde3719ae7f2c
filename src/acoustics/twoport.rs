//! ABCD two-port matrices of acoustic elements and their algebra.
use super::C64;

/// `[p1; U1] = [a b; c d]·[p2; U2]`, p in Pa, U in m³/s.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TwoPort {
    /// p1/p2 with U2 = 0.
    pub a: C64,
    /// p1/U2 with p2 = 0, Pa·s/m³.
    pub b: C64,
    /// U1/p2 with U2 = 0, m³/(Pa·s).
    pub c: C64,
    /// U1/U2 with p2 = 0.
    pub d: C64,
}

impl TwoPort {
    /// The identity (a zero-length connection).
    pub fn identity() -> Self {
        let (o, z) = (C64::new(1.0, 0.0), C64::new(0.0, 0.0));
        TwoPort {
            a: o,
            b: z,
            c: z,
            d: o,
        }
    }
    /// A series impedance `z` (Pa·s/m³): [1 z; 0 1].
    pub fn series(z: C64) -> Self {
        TwoPort {
            b: z,
            ..Self::identity()
        }
    }
    /// A shunt admittance `y` (m³/(Pa·s)) to ground: [1 0; y 1].
    pub fn shunt(y: C64) -> Self {
        TwoPort {
            c: y,
            ..Self::identity()
        }
    }
    /// `self` followed by `next` (matrix product self·next).
    pub fn then(&self, next: &TwoPort) -> TwoPort {
        TwoPort {
            a: self.a * next.a + self.b * next.c,
            b: self.a * next.b + self.b * next.d,
            c: self.c * next.a + self.d * next.c,
            d: self.c * next.b + self.d * next.d,
        }
    }
    /// Input impedance with load impedance `z_load` at port 2; `None` = rigid (U2 = 0).
    pub fn input_impedance(&self, z_load: Option<C64>) -> C64 {
        match z_load {
            None => self.a / self.c,
            Some(z) => (self.a * z + self.b) / (self.c * z + self.d),
        }
    }
}
