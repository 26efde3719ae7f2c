//! Signal processing building blocks: sweep, deconvolution, grids, smoothing.
//!
//! FFT normalisation (stated once, kept everywhere): forward transforms are unnormalised
//! (`X[k] = Σ x[n]·e^{−j2πkn/N}`), inverse transforms are unnormalised too, and the code that
//! calls an inverse divides by N itself.

pub mod bands;
pub mod fft;
pub mod interp;
pub mod ramp;
pub mod signals;
pub mod smoothing;
pub mod spectrum;
pub mod sweep;
