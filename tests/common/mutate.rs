//! Mutations of valid inputs for the readers' robustness tests: seeded, so every failure
//! reproduces. Each mutation is one of the damage a file meets in practice (a flipped or lost
//! byte, a cut, a repeated or dropped line, a cell replaced by an extreme or malformed value).

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Cell values that break naive readers: extremes, non-finite spellings, signs, empties,
/// separators, quotes and non-UTF-8 bytes.
const NASTY: &[&[u8]] = &[
    b"",
    b"-",
    b"1e308",
    b"-1e308",
    b"1e309",
    b"nan",
    b"NaN",
    b"inf",
    b"-inf",
    b"0",
    b"-0",
    b"-1",
    b"18446744073709551616",
    b"99999999999999999999999",
    b"1.5",
    b"\"",
    b",",
    b"\n",
    b"\r\n",
    b"{",
    b"}",
    b"[]",
    b"null",
    b"\xff\xfe",
    b"\x00",
    b"true",
];

/// `count` mutated copies of the `seeds` (each copy from one seed, one to four mutations),
/// from a ChaCha8 stream seeded with `seed`.
pub fn mutants(seeds: &[Vec<u8>], count: usize, seed: u64) -> Vec<Vec<u8>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..count)
        .map(|_| {
            let mut b = seeds[rng.random_range(0..seeds.len())].clone();
            for _ in 0..rng.random_range(1..5) {
                mutate(&mut b, &mut rng);
            }
            b
        })
        .collect()
}

fn line_starts(b: &[u8]) -> Vec<usize> {
    std::iter::once(0)
        .chain(
            b.iter()
                .enumerate()
                .filter(|(_, &c)| c == b'\n')
                .map(|(i, _)| i + 1),
        )
        .filter(|&i| i <= b.len())
        .collect()
}

fn mutate(b: &mut Vec<u8>, rng: &mut ChaCha8Rng) {
    let len = b.len();
    let at = if len == 0 {
        0
    } else {
        rng.random_range(0..len)
    };
    match rng.random_range(0..8) {
        // Flip a byte.
        0 if len > 0 => b[at] ^= 1 << rng.random_range(0..8),
        // Delete a run of bytes.
        1 if len > 0 => {
            let end = (at + rng.random_range(1..8)).min(len);
            b.drain(at..end);
        }
        // Cut the end off.
        2 => b.truncate(at),
        // Insert a nasty value.
        3 => {
            let v = NASTY[rng.random_range(0..NASTY.len())];
            b.splice(at..at, v.iter().copied());
        }
        // Replace a token (a run of non-separator bytes) by a nasty value.
        4 if len > 0 => {
            let sep = |c: u8| matches!(c, b',' | b'\n' | b':' | b' ' | b'"' | b'[' | b']');
            let mut s = at;
            while s > 0 && !sep(b[s - 1]) {
                s -= 1;
            }
            let mut e = at;
            while e < len && !sep(b[e]) {
                e += 1;
            }
            let v = NASTY[rng.random_range(0..NASTY.len())];
            b.splice(s..e, v.iter().copied());
        }
        // Repeat a line.
        5 => {
            let starts = line_starts(b);
            let i = rng.random_range(0..starts.len());
            let s = starts[i];
            let e = starts.get(i + 1).copied().unwrap_or(len);
            let line: Vec<u8> = b[s..e].to_vec();
            b.splice(s..s, line);
        }
        // Drop a line.
        6 => {
            let starts = line_starts(b);
            let i = rng.random_range(0..starts.len());
            let s = starts[i];
            let e = starts.get(i + 1).copied().unwrap_or(len);
            b.drain(s..e);
        }
        // Random bytes.
        _ => {
            let n = rng.random_range(1..6);
            let bytes: Vec<u8> = (0..n).map(|_| rng.random_range(0..=255u8)).collect();
            b.splice(at..at, bytes);
        }
    }
}
