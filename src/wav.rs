//! WAV files: reading captures and writing stimuli and raw captures (32-bit float).
