//! The edit list of an MP4/M4A audio track (ISO/IEC 14496-12, `moov/trak/edts/elst`), which
//! holds an AAC stream's priming: the encoder's delay, to drop from the start of the decoded
//! samples, and the presented duration, which drops the padding at the end. symphonia 0.5
//! reads the box but does not apply it.

/// What the edit list of the audio track says, in samples at the stream's sample rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct AudioEdit {
    pub priming_samples: u64,
    pub duration_samples: Option<u64>,
}

/// Boxes of `bytes` as (type, body).
pub(crate) fn boxes(bytes: &[u8]) -> impl Iterator<Item = (&[u8], &[u8])> {
    let mut at = 0usize;
    std::iter::from_fn(move || {
        let header = bytes.get(at..at.checked_add(8)?)?;
        let size32 = u32::from_be_bytes([header[0], header[1], header[2], header[3]]);
        let kind = &header[4..8];
        let (body_start, size) = match size32 {
            0 => (at + 8, bytes.len() - at),
            1 => {
                let large = bytes.get(at + 8..at.checked_add(16)?)?;
                let size = u64::from_be_bytes(large.try_into().ok()?);
                (at + 16, usize::try_from(size).ok()?)
            }
            n => (at + 8, n as usize),
        };
        let end = at.checked_add(size)?;
        if end > bytes.len() || end < body_start {
            return None;
        }
        let body = &bytes[body_start..end];
        at = end;
        Some((kind, body))
    })
}

pub(crate) fn child<'a>(bytes: &'a [u8], kind: &[u8]) -> Option<&'a [u8]> {
    boxes(bytes).find(|(k, _)| *k == kind).map(|(_, b)| b)
}

pub(crate) fn be_u32(b: &[u8], at: usize) -> Option<u32> {
    Some(u32::from_be_bytes(b.get(at..at + 4)?.try_into().ok()?))
}

pub(crate) fn be_u64(b: &[u8], at: usize) -> Option<u64> {
    Some(u64::from_be_bytes(b.get(at..at + 8)?.try_into().ok()?))
}

/// Time scale of an `mvhd` or `mdhd` box (version 0: 32-bit times, version 1: 64-bit).
pub(crate) fn timescale(full_box: &[u8]) -> Option<u32> {
    let at = if *full_box.first()? == 1 { 20 } else { 12 };
    be_u32(full_box, at).filter(|&t| t > 0)
}

/// The edit of the first audio track of an MP4 file, when it has one that starts the media at
/// a known time (no empty edit, one media edit at normal rate).
pub(crate) fn audio_edit(bytes: &[u8], sample_rate: u32) -> Option<AudioEdit> {
    let moov = child(bytes, b"moov")?;
    let movie_scale = timescale(child(moov, b"mvhd")?)?;
    let trak = boxes(moov).filter(|(k, _)| *k == b"trak").find(|(_, t)| {
        child(t, b"mdia")
            .and_then(|m| child(m, b"hdlr"))
            .and_then(|h| h.get(8..12))
            == Some(b"soun".as_slice())
    })?;
    let media_scale = timescale(child(child(trak.1, b"mdia")?, b"mdhd")?)?;
    let elst = child(child(trak.1, b"edts")?, b"elst")?;
    let version = *elst.first()?;
    let count = be_u32(elst, 4)?;
    if count != 1 {
        return None;
    }
    let (duration, media_time) = if version == 1 {
        (be_u64(elst, 8)?, be_u64(elst, 16)? as i64)
    } else {
        (
            u64::from(be_u32(elst, 8)?),
            i64::from(be_u32(elst, 12)? as i32),
        )
    };
    if media_time < 0 {
        return None;
    }
    let to_samples = |t: u64, scale: u32| {
        u64::try_from(u128::from(t) * u128::from(sample_rate) / u128::from(scale)).ok()
    };
    Some(AudioEdit {
        priming_samples: to_samples(media_time as u64, media_scale)?,
        duration_samples: (duration > 0)
            .then(|| to_samples(duration, movie_scale))
            .flatten(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn mp4_box(kind: &[u8; 4], body: &[u8]) -> Vec<u8> {
        let mut b = ((body.len() + 8) as u32).to_be_bytes().to_vec();
        b.extend(kind);
        b.extend(body);
        b
    }

    #[test]
    fn the_edit_list_of_the_sound_track_gives_priming_and_duration() {
        // ISO/IEC 14496-12: mvhd/mdhd version 0 put the time scale after version+flags and two
        // 32-bit times; elst version 0 holds (duration u32, media_time i32, rate u32).
        let mut mvhd = vec![0u8; 100];
        mvhd[12..16].copy_from_slice(&1000u32.to_be_bytes());
        let mut mdhd = vec![0u8; 24];
        mdhd[12..16].copy_from_slice(&48_000u32.to_be_bytes());
        let mut hdlr = vec![0u8; 24];
        hdlr[8..12].copy_from_slice(b"soun");
        let mut elst = vec![0, 0, 0, 0];
        elst.extend(1u32.to_be_bytes());
        elst.extend(500u32.to_be_bytes());
        elst.extend(1024u32.to_be_bytes());
        elst.extend(0x0001_0000u32.to_be_bytes());
        let mdia = [mp4_box(b"mdhd", &mdhd), mp4_box(b"hdlr", &hdlr)].concat();
        let trak = [
            mp4_box(b"edts", &mp4_box(b"elst", &elst)),
            mp4_box(b"mdia", &mdia),
        ]
        .concat();
        let moov = [mp4_box(b"mvhd", &mvhd), mp4_box(b"trak", &trak)].concat();
        let file = [mp4_box(b"ftyp", b"M4A \0\0\0\0"), mp4_box(b"moov", &moov)].concat();
        let edit = audio_edit(&file, 48_000).unwrap();
        assert_eq!(edit.priming_samples, 1024);
        assert_eq!(edit.duration_samples, Some(24_000));
        // Truncated anywhere, the walk stops without a panic.
        for cut in 0..file.len() {
            let _ = audio_edit(&file[..cut], 48_000);
        }
    }
}
