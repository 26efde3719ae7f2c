//! The foundation of every YAML file the project reads: plans, coupler models, earphone
//! files, station files and calibration files.
//!
//! It sits below every stage and imports nothing from the rest of the crate. Each file
//! kind's loader is [`load_file`] (regular files only, at most [`MAX_CONFIG_BYTES`], UTF-8)
//! followed by that kind's own reading of the text: [`parse_tree`] or a [`Decoder`] for the
//! marked node tree (nesting at most [`MAX_NESTING_DEPTH`] levels, no anchors, tags or
//! duplicate keys), then serde structs decoded key by key ([`Decoder::section`]) or values
//! read node by node ([`NodeReader`]). Every problem of a file is reported at once as a
//! [`Problem`], `path:line:col: message`, in the shared words of [`message`].

pub mod diag;
pub mod file;
pub mod message;
pub mod reader;
pub mod tree;

pub use diag::{sort_problems, Location, Pos, Problem};
pub use file::{load_file, read_data_file, recording_reads, FileError, Refusal, MAX_CONFIG_BYTES};
pub use message::{found, found_scalar, is_channel_name, is_id, label, show_text, suggest};
pub use reader::NodeReader;
pub use tree::{mapping_pos, parse_tree, Decoder, Section, MAX_NESTING_DEPTH};
