//! The recording rig: a capture read from a WAV file.
