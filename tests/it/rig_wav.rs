//! WAV reading and writing: bit-exact float round trip, integer scaling, and bad files that
//! must give an error (never a panic) with a message naming the file, what was expected and
//! what was found. Reference for the format: the RIFF/WAVE layout (44-byte canonical PCM
//! header: "RIFF", size, "WAVE", "fmt " chunk of 16 bytes, "data" chunk).

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use tragus::wav::{decode_wav, encode_wav_f32, read_wav, write_wav_f32, WavErrorKind};

/// A canonical 44-byte-header PCM/float WAV built by hand (independent of hound's writer).
fn hand_wav(format_tag: u16, channels: u16, rate: u32, bits: u16, data: &[u8]) -> Vec<u8> {
    let block_align = channels * bits.div_ceil(8);
    let mut v = Vec::new();
    v.extend_from_slice(b"RIFF");
    v.extend_from_slice(&(36 + data.len() as u32).to_le_bytes());
    v.extend_from_slice(b"WAVEfmt ");
    v.extend_from_slice(&16u32.to_le_bytes());
    v.extend_from_slice(&format_tag.to_le_bytes());
    v.extend_from_slice(&channels.to_le_bytes());
    v.extend_from_slice(&rate.to_le_bytes());
    v.extend_from_slice(&(rate * u32::from(block_align)).to_le_bytes());
    v.extend_from_slice(&block_align.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v.extend_from_slice(b"data");
    v.extend_from_slice(&(data.len() as u32).to_le_bytes());
    v.extend_from_slice(data);
    v
}

fn i16_bytes(samples: &[i16]) -> Vec<u8> {
    samples.iter().flat_map(|s| s.to_le_bytes()).collect()
}

#[test]
fn float_round_trip_is_bit_exact() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let specials = [
        0.0f32,
        -0.0,
        1.0,
        -1.0,
        f32::MIN_POSITIVE,
        1e-45,
        f32::MAX,
        -f32::MAX,
    ];
    let channels: Vec<Vec<f32>> = (0..3)
        .map(|c| {
            let mut ch: Vec<f32> = specials
                .iter()
                .map(|v| v * (c as f32 + 1.0).signum())
                .collect();
            while ch.len() < 1000 {
                let v = f32::from_bits(rng.random::<u32>());
                if v.is_finite() {
                    ch.push(v);
                }
            }
            ch
        })
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("round.wav");
    write_wav_f32(&path, 44_100, &channels).unwrap();
    let back = read_wav(&path).unwrap();
    assert_eq!(back.sample_rate_hz, 44_100);
    assert_eq!(back.channels.len(), 3);
    for (a, b) in channels.iter().zip(&back.channels) {
        let (ab, bb): (Vec<u32>, Vec<u32>) = (
            a.iter().map(|v| v.to_bits()).collect(),
            b.iter().map(|v| v.to_bits()).collect(),
        );
        assert_eq!(ab, bb);
    }
    // The in-memory encoder writes the same bytes the file holds.
    assert_eq!(
        std::fs::read(&path).unwrap(),
        encode_wav_f32(44_100, &channels).unwrap()
    );
    // No temporary file is left beside the result.
    let names: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names, vec![std::ffi::OsString::from("round.wav")]);
}

#[test]
fn float_header_is_extensible_ieee_float() {
    // hound writes WAVE_FORMAT_EXTENSIBLE (tag 0xFFFE) whose SubFormat GUID starts with
    // 0x0003 (KSDATAFORMAT_SUBTYPE_IEEE_FLOAT), 32 bits, interleaved frames; checked byte by
    // byte against the WAVEFORMATEXTENSIBLE layout (SubFormat at byte 24 of the fmt data).
    let bytes = encode_wav_f32(48_000, &[vec![0.5, -0.25], vec![1.0, 0.0]]).unwrap();
    assert_eq!(&bytes[0..4], b"RIFF");
    assert_eq!(&bytes[8..12], b"WAVE");
    let fmt = bytes.windows(4).position(|w| w == b"fmt ").unwrap();
    let tag = u16::from_le_bytes([bytes[fmt + 8], bytes[fmt + 9]]);
    let ch = u16::from_le_bytes([bytes[fmt + 10], bytes[fmt + 11]]);
    let rate = u32::from_le_bytes(bytes[fmt + 12..fmt + 16].try_into().unwrap());
    let bits = u16::from_le_bytes([bytes[fmt + 22], bytes[fmt + 23]]);
    let subformat = u16::from_le_bytes([bytes[fmt + 32], bytes[fmt + 33]]);
    assert_eq!((tag, ch, rate, bits, subformat), (0xfffe, 2, 48_000, 32, 3));
    let data = bytes.windows(4).position(|w| w == b"data").unwrap() + 8;
    let got: Vec<f32> = bytes[data..]
        .chunks(4)
        .map(|c| f32::from_le_bytes(c.try_into().unwrap()))
        .collect();
    assert_eq!(got, vec![0.5, 1.0, -0.25, 0.0]);
}

#[test]
fn integer_samples_scale_to_full_scale() {
    // Convention (module doc, common practice): v / 2^(bits−1).
    let s16 = [-32768i16, -16384, 0, 16384, 32767, 1];
    let d = decode_wav(&hand_wav(1, 2, 8000, 16, &i16_bytes(&s16))).unwrap();
    assert_eq!(d.sample_rate_hz, 8000);
    assert_eq!(d.channels[0], vec![-1.0, 0.0, 32767.0 / 32768.0]);
    assert_eq!(d.channels[1], vec![-0.5, 0.5, 1.0 / 32768.0]);

    let s24: [i32; 3] = [-8_388_608, 4_194_304, 8_388_607];
    let b24: Vec<u8> = s24
        .iter()
        .flat_map(|v| v.to_le_bytes()[..3].to_vec())
        .collect();
    let d = decode_wav(&hand_wav(1, 1, 48_000, 24, &b24)).unwrap();
    assert_eq!(
        d.channels[0],
        vec![-1.0, 0.5, (8_388_607.0f64 / 8_388_608.0) as f32]
    );

    let s32 = [i32::MIN, 1 << 30, -(1 << 29)];
    let b32: Vec<u8> = s32.iter().flat_map(|v| v.to_le_bytes()).collect();
    let d = decode_wav(&hand_wav(1, 1, 96_000, 32, &b32)).unwrap();
    assert_eq!(d.channels[0], vec![-1.0, 0.5, -0.25]);
}

#[test]
fn hound_written_24_bit_in_4_byte_containers_reads() {
    // WAVE_FORMAT_EXTENSIBLE with 24 valid bits in 32-bit containers (as some interfaces
    // record), written by hound's own writer.
    let spec = hound::WavSpecEx {
        spec: hound::WavSpec {
            channels: 3,
            sample_rate: 48_000,
            bits_per_sample: 24,
            sample_format: hound::SampleFormat::Int,
        },
        bytes_per_sample: 4,
    };
    let mut cur = std::io::Cursor::new(Vec::new());
    {
        let mut w = hound::WavWriter::new_with_spec_ex(&mut cur, spec).unwrap();
        for v in [
            4_194_304i32,
            -8_388_608,
            0,
            -4_194_304,
            2_097_152,
            8_388_607,
        ] {
            w.write_sample(v).unwrap();
        }
        w.finalize().unwrap();
    }
    let d = decode_wav(cur.get_ref()).unwrap();
    assert_eq!(d.channels.len(), 3);
    assert_eq!(d.channels[0], vec![0.5, -0.5]);
    assert_eq!(d.channels[1], vec![-1.0, 0.25]);
}

fn message(bytes: &[u8]) -> String {
    match decode_wav(bytes) {
        Ok(d) => panic!("expected an error, decoded {} channels", d.channels.len()),
        Err(e) => e.to_string(),
    }
}

#[test]
fn not_a_wav_file_is_refused() {
    assert_eq!(
        message(b""),
        "expected a WAV file (bytes 0..4 \"RIFF\", 8..12 \"WAVE\"), found an empty file"
    );
    assert_eq!(
        message(b"ID3\x03 some mp3"),
        "expected a WAV file (bytes 0..4 \"RIFF\", 8..12 \"WAVE\"), found \"ID3\\x03\" at byte 0"
    );
    assert_eq!(
        message(b"RIFF\x10\0\0\0AVI LIST"),
        "expected a WAV file (bytes 0..4 \"RIFF\", 8..12 \"WAVE\"), found RIFF form type \"AVI \""
    );
}

#[test]
fn random_bytes_never_panic() {
    let mut rng = ChaCha8Rng::seed_from_u64(2024);
    let header = hand_wav(3, 2, 48_000, 32, &[0u8; 64]);
    for round in 0..2000 {
        let n = rng.random_range(0..300);
        let mut bytes: Vec<u8> = (0..n).map(|_| rng.random()).collect();
        // Half the rounds keep a valid start, so the parser gets past the magic.
        if round % 2 == 1 {
            let keep = rng.random_range(12..header.len());
            let mut v = header[..keep].to_vec();
            v.extend_from_slice(&bytes);
            bytes = v;
        }
        // Pure random bytes are never a WAV: their first bytes are not "RIFF" (checked).
        let r = decode_wav(&bytes);
        if round % 2 == 0 && !bytes.starts_with(b"RIFF") {
            assert!(r.is_err(), "round {round}: random bytes decoded");
        }
        if let Ok(d) = r {
            // Whatever decoded must be consistent.
            assert!(d.channels.iter().all(|c| c.len() == d.n_samples()));
        }
    }
    // Single-byte corruptions of a valid file: error or consistent data, never a panic.
    let good = hand_wav(1, 2, 48_000, 16, &i16_bytes(&[1, 2, 3, 4, 5, 6]));
    for i in 0..good.len() {
        for v in [0u8, 0xff, 0x80, 1] {
            let mut b = good.clone();
            b[i] = v;
            if let Ok(d) = decode_wav(&b) {
                assert!(d.channels.iter().all(|c| c.len() == d.n_samples()));
            }
        }
    }
}

#[test]
fn truncated_header_is_refused_at_every_length() {
    let good = hand_wav(1, 1, 48_000, 16, &i16_bytes(&[1, 2, 3]));
    for n in 1..44 {
        let e = decode_wav(&good[..n]).unwrap_err();
        assert!(
            matches!(e, WavErrorKind::TruncatedHeader { n_bytes } if n_bytes == n),
            "{n} bytes: {e}"
        );
    }
    assert_eq!(
        message(&good[..30]),
        "expected a complete WAV header (RIFF, fmt and data chunk headers), found the file \
         ends after 30 bytes"
    );
}

#[test]
fn truncated_data_reports_how_much_is_there() {
    // Stereo 16-bit, 100 frames promised (4 bytes per frame).
    let samples: Vec<i16> = (0..200).collect();
    let good = hand_wav(1, 2, 48_000, 16, &i16_bytes(&samples));
    assert_eq!(decode_wav(&good).unwrap().n_samples(), 100);
    for (cut, frames) in [
        (1usize, 99usize),
        (2, 99),
        (4, 99),
        (5, 98),
        (399, 0),
        (400, 0),
    ] {
        let e = decode_wav(&good[..good.len() - cut]).unwrap_err();
        assert!(
            matches!(e, WavErrorKind::Truncated { n_found, n_expected: 100 } if n_found == frames),
            "cut {cut}: {e}"
        );
    }
    assert_eq!(
        message(&good[..good.len() - 5]),
        "expected 100 samples per channel (data chunk header), found 98 (truncated: 98 of 100 \
         samples)"
    );
    // A header that promises 4 GiB on a tiny file is refused without allocating it.
    let mut huge = hand_wav(3, 1, 48_000, 32, &[0u8; 8]);
    let at = huge.len() - 12;
    huge[at..at + 4].copy_from_slice(&0xffff_fff0u32.to_le_bytes());
    assert!(matches!(
        decode_wav(&huge).unwrap_err(),
        WavErrorKind::Truncated {
            n_found: 2,
            n_expected: 1_073_741_820
        }
    ));
}

#[test]
fn unsupported_formats_are_refused() {
    assert_eq!(
        message(&hand_wav(1, 1, 8000, 8, &[128, 129, 127])),
        "expected 16-, 24- or 32-bit integer PCM or 32-bit float samples, found 8-bit integer PCM"
    );
    // Format tag 2 (ADPCM) and 0x55 (MPEG layer 3) are compressed.
    for tag in [2u16, 0x55] {
        assert_eq!(
            message(&hand_wav(tag, 1, 8000, 16, &[0, 0])),
            "expected 16-, 24- or 32-bit integer PCM or 32-bit float samples, found a format \
             tag other than PCM (1), IEEE float (3) or extensible PCM/float"
        );
    }
}

#[test]
fn zero_channels_are_refused() {
    let mut b = hand_wav(1, 1, 8000, 16, &[]);
    b[22..24].copy_from_slice(&0u16.to_le_bytes()); // nChannels
    assert_eq!(message(&b), "expected at least one channel, found 0");
}

#[test]
fn non_finite_float_samples_are_refused() {
    let data: Vec<u8> = [0.5f32, 0.25, f32::NAN, 0.0]
        .iter()
        .flat_map(|v| v.to_le_bytes())
        .collect();
    assert_eq!(
        message(&hand_wav(3, 2, 48_000, 32, &data)),
        "expected finite samples, found NaN at sample 1 of channel 0"
    );
}

#[test]
fn file_errors_name_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("nope.wav");
    let e = read_wav(&missing).unwrap_err();
    let text = e.to_string();
    assert!(
        text.starts_with(&format!(
            "{}: expected a readable file, found ",
            missing.display()
        )),
        "{text}"
    );
    let bad = dir.path().join("bad.wav");
    std::fs::write(&bad, b"RIFF").unwrap();
    assert_eq!(
        read_wav(&bad).unwrap_err().to_string(),
        format!(
            "{}: expected a complete WAV header (RIFF, fmt and data chunk headers), found the \
             file ends after 4 bytes",
            bad.display()
        )
    );
}

#[test]
fn writer_refuses_what_cannot_be_a_wav() {
    let e = encode_wav_f32(48_000, &[vec![0.0; 3], vec![0.0; 2]]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected channels of equal length, found channel 0 has 3 samples, channel 1 has 2"
    );
    assert_eq!(
        encode_wav_f32(48_000, &[]).unwrap_err().to_string(),
        "expected at least one channel to write, found none"
    );
    assert_eq!(
        encode_wav_f32(0, &[vec![0.0]]).unwrap_err().to_string(),
        "expected a sample rate above 0 Hz, found 0 Hz"
    );
    // A destination in a folder that does not exist: an error naming it, nothing written.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("missing-dir").join("x.wav");
    let e = write_wav_f32(&path, 48_000, &[vec![0.0]]).unwrap_err();
    assert!(
        e.to_string().starts_with(&format!(
            "{}: expected a writable destination, found ",
            path.display()
        )),
        "{e}"
    );
    assert!(!Path::new(&path).exists());
}

#[test]
fn rewriting_replaces_the_old_file_whole() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cap.wav");
    write_wav_f32(&path, 48_000, &[vec![0.1; 1000]]).unwrap();
    write_wav_f32(&path, 48_000, &[vec![0.2; 10], vec![0.3; 10]]).unwrap();
    let d = read_wav(&path).unwrap();
    assert_eq!(d.channels, vec![vec![0.2f32; 10], vec![0.3f32; 10]]);
}
