//! A zlib stream (RFC 1950) of a large buffer, compressed in pieces on several threads.
//!
//! Each piece is raw deflate (RFC 1951) ended by a sync flush (an empty stored block that
//! leaves the stream on a byte boundary, without the final-block bit), the last piece is
//! finished; joined, the pieces are one deflate stream. The Adler-32 of the whole is combined
//! from the pieces' own. Each piece starts with an empty dictionary, so no match reaches back
//! across a seam: the stream is a little larger than one thread's (a few hundred bytes a seam).

/// Largest Adler-32 sum modulus (RFC 1950 §8.2).
const BASE: u32 = 65_521;

/// Pieces below this many bytes are not worth a thread.
const MIN_PIECE: usize = 256 << 10;

/// The zlib stream of `data` at the default level, compressed on up to `threads` threads.
pub fn compress(data: &[u8], threads: usize) -> std::io::Result<Vec<u8>> {
    let pieces = threads.clamp(1, (data.len() / MIN_PIECE).max(1));
    let per = data.len().div_ceil(pieces).max(1);
    let chunks: Vec<&[u8]> = if data.is_empty() {
        vec![data]
    } else {
        data.chunks(per).collect()
    };
    let last = chunks.len() - 1;
    let parts: Vec<std::io::Result<(Vec<u8>, u32)>> = std::thread::scope(|scope| {
        let handles: Vec<_> = chunks
            .iter()
            .enumerate()
            .map(|(k, chunk)| {
                scope.spawn(move || {
                    let flush = if k == last {
                        flate2::FlushCompress::Finish
                    } else {
                        flate2::FlushCompress::Sync
                    };
                    Ok((deflate_raw(chunk, flush)?, adler32(chunk)))
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
            .collect()
    });
    // 0x78 0x9C: deflate with a 32 KiB window, default level, and a header check (RFC 1950).
    let mut out = vec![0x78, 0x9C];
    let mut adler = 1;
    for (part, chunk) in parts.into_iter().zip(&chunks) {
        let (bytes, sum) = part?;
        out.extend_from_slice(&bytes);
        adler = adler32_combine(adler, sum, chunk.len());
    }
    out.extend_from_slice(&adler.to_be_bytes());
    Ok(out)
}

/// Raw deflate of `data`, ended by `flush` (a sync flush or the stream's end).
fn deflate_raw(data: &[u8], flush: flate2::FlushCompress) -> std::io::Result<Vec<u8>> {
    let mut c = flate2::Compress::new(flate2::Compression::default(), false);
    let mut out = Vec::with_capacity(data.len() / 4 + 1024);
    loop {
        if out.capacity() - out.len() < 1024 {
            out.reserve(out.capacity() / 2 + 1024);
        }
        let consumed = c.total_in() as usize;
        let status = c
            .compress_vec(&data[consumed..], &mut out, flush)
            .map_err(std::io::Error::other)?;
        let all_in = c.total_in() as usize == data.len();
        let room_left = out.len() < out.capacity();
        match (flush, status) {
            (_, flate2::Status::StreamEnd) => return Ok(out),
            (flate2::FlushCompress::Sync, _) if all_in && room_left => return Ok(out),
            _ => {}
        }
    }
}

/// Adler-32 of `data` (RFC 1950 §8.2).
pub fn adler32(data: &[u8]) -> u32 {
    // 5552 bytes is the most that can be summed before the sums could overflow 32 bits.
    let (mut a, mut b) = (1u32, 0u32);
    for block in data.chunks(5552) {
        for &byte in block {
            a += u32::from(byte);
            b += a;
        }
        a %= BASE;
        b %= BASE;
    }
    (b << 16) | a
}

/// The Adler-32 of two buffers one after the other, from theirs and the second's length (the
/// method of zlib's `adler32_combine`).
pub fn adler32_combine(first: u32, second: u32, second_len: usize) -> u32 {
    let base = u64::from(BASE);
    let rem = second_len as u64 % base;
    let a1 = u64::from(first & 0xffff);
    let a = (a1 + u64::from(second & 0xffff) + base - 1) % base;
    let b = (rem * a1 + u64::from(first >> 16) + u64::from(second >> 16) + base - rem) % base;
    ((b << 16) | a) as u32
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Read;

    fn sample(n: usize) -> Vec<u8> {
        // Runs and noise, like a map's rows: long repeats with changes between them.
        (0..n)
            .map(|i| ((i / 700) as u8).wrapping_mul(37) ^ ((i * 2_654_435_761) >> 29) as u8 & 3)
            .collect()
    }

    #[test]
    fn adler32_matches_known_values() {
        // RFC 1950 defines Adler-32; "Wikipedia" → 0x11E60398 is the common worked example
        // (from memory), and the empty buffer's sum is 1 by definition.
        assert_eq!(adler32(b"Wikipedia"), 0x11E6_0398);
        assert_eq!(adler32(b""), 1);
    }

    #[test]
    fn combined_sums_are_the_sum_of_the_whole() {
        let data = sample(200_000);
        for cut in [0, 1, 5551, 5552, 65_521, 65_522, 131_042, 199_999, 200_000] {
            let (x, y) = data.split_at(cut);
            assert_eq!(
                adler32_combine(adler32(x), adler32(y), y.len()),
                adler32(&data),
                "cut at {cut}"
            );
        }
    }

    #[test]
    fn pieces_decompress_to_the_input_with_a_library_decoder() {
        for (n, threads) in [
            (0, 2),
            (10, 2),
            (300_000, 1),
            (1_000_000, 2),
            (2_000_003, 3),
        ] {
            let data = sample(n);
            let z = compress(&data, threads).unwrap();
            let mut back = Vec::new();
            flate2::read::ZlibDecoder::new(&z[..])
                .read_to_end(&mut back)
                .unwrap();
            assert_eq!(back, data, "{n} bytes on {threads} threads");
        }
    }
}
