//! Line framing: one message per line, terminator included.

use super::{Frame, MAX_MESSAGE_BYTES, Role, Skips};

/// Splits `bytes` into lines. Each frame keeps its LF or CRLF so a message replays byte-exactly;
/// a last line without terminator is kept as is. Lines over [`MAX_MESSAGE_BYTES`] are skipped and
/// counted.
pub fn frame_lines(bytes: &[u8], skips: &mut Skips) -> Vec<Frame> {
    let mut frames = Vec::with_capacity(bytes.len() / 64 + 1);
    let mut start = 0;
    // One iterator over all newlines: far cheaper than a fresh search per short line.
    let ends = memchr::memchr_iter(b'\n', bytes).map(|i| i + 1);
    let last = (bytes.last() != Some(&b'\n') && !bytes.is_empty()).then_some(bytes.len());
    for end in ends.chain(last) {
        if end - start > MAX_MESSAGE_BYTES {
            skips.add("lines over 1 MiB", 1);
        } else {
            frames.push(Frame { range: start..end, role: Role::Request });
        }
        start = end;
    }
    frames
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keeps_terminators_and_last_unterminated_line() {
        let bytes = b"a\r\nb\n\nc";
        let frames = frame_lines(bytes, &mut Skips::default());
        let parts: Vec<&[u8]> = frames.iter().map(|f| &bytes[f.range.clone()]).collect();
        assert_eq!(parts, vec![&b"a\r\n"[..], b"b\n", b"\n", b"c"]);
    }

    #[test]
    fn skips_overlong_lines() {
        let mut bytes = vec![b'x'; MAX_MESSAGE_BYTES + 5];
        bytes.extend_from_slice(b"\nok\n");
        let mut skips = Skips::default();
        let frames = frame_lines(&bytes, &mut skips);
        assert_eq!(frames.len(), 1);
        assert_eq!(skips.total(), 1);
    }
}
