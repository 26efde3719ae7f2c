//! Model files: the YAML formats of acoustic couplers (`coupler`) and virtual earphones
//! (`earphone`), read with the one loader ([`crate::config`]) into the physics of
//! [`crate::acoustics`], with every problem at `path:line:col` and a canonical form for
//! their hashes. Configuration layer: physics never reads a file format.

pub mod coupler;
pub mod earphone;
