//! Fuzz target: the incremental CSV splitter on arbitrary bytes.
//!
//! The input is the byte stream itself (so seeds are plain CSV exports). Chunkings and the
//! record limit are derived from a hash of the input. Properties:
//!
//! * no panic;
//! * every chunking (byte by byte, fixed sizes, pseudo-random cuts) reports exactly the items
//!   of a one-shot feed, with the same final checkpoint and held bytes;
//! * records never exceed the limit, spans are increasing and end at or before the fed length;
//! * restarting a fresh splitter at any reported boundary reproduces the rest.
#![no_main]

use efftemp::hash::fnv1a64;
use efftemp::ingest::split::{Held, Position, Splitter};
use libfuzzer_sys::fuzz_target;
use oracles::{Got, own};

#[path = "../../tests/shared/oracles.rs"]
mod oracles;

/// Feed `input[from..]` to the splitter restarted at `from`, in pieces ending at `cuts`. (One
/// splitter is reused through `reset`, which must forget everything: building csv-core's DFA
/// for a new one would cost more than the splitting.)
fn split(
    s: &mut Splitter,
    input: &[u8],
    from: Position,
    cuts: &[usize],
) -> (Vec<Got>, Position, Option<Held>) {
    s.reset(from);
    let mut got = Vec::new();
    let mut at = from.offset as usize;
    let mut points: Vec<usize> = cuts.iter().copied().filter(|&c| c > at && c < input.len()).collect();
    points.sort_unstable();
    points.push(input.len());
    for c in points {
        s.feed(&input[at..c], &mut |it| got.push(own(it)));
        at = c;
    }
    assert_eq!(s.fed_to().offset, input.len() as u64);
    (got, s.position(), s.held())
}

fn fixed(len: usize, step: usize) -> Vec<usize> {
    (1..len).step_by(step).collect()
}

fuzz_target!(|input: &[u8]| {
    let h = fnv1a64(input);
    for max in [1usize << 20, 1 + (h % 64) as usize] {
        let s = &mut Splitter::new(max);
        let (whole, pos, held) = split(s, input, Position::START, &[]);

        // Sanity of the one-shot items.
        let mut last_end = 0;
        for g in &whole {
            let (start, end) = g.span();
            assert!(start >= last_end && end > start && end <= input.len() as u64, "{g:?}");
            assert_eq!(g.next().offset, end);
            if let Got::Record { fields, .. } = g {
                assert!(end - start <= max as u64, "record over the limit: {g:?}");
                assert!(!fields.is_empty());
            }
            last_end = end;
        }
        assert!(pos.offset >= last_end && pos.offset <= input.len() as u64);
        if let Some(hd) = held {
            assert_eq!(hd.start, pos);
            assert_eq!(hd.start.offset + hd.bytes, input.len() as u64);
        }

        // Any chunking gives the same items, checkpoint and held bytes.
        let mut rng = h | 1;
        let mut random = Vec::new();
        for i in 0..input.len().min(64) {
            rng ^= rng << 13;
            rng ^= rng >> 7;
            rng ^= rng << 17;
            if rng % 4 == 0 {
                random.push((rng as usize) % input.len().max(1) + i % 2);
            }
        }
        random.sort_unstable();
        for cuts in [fixed(input.len(), 1), fixed(input.len(), 2), fixed(input.len(), 7), random] {
            let (got, p, hd) = split(s, input, Position::START, &cuts);
            assert_eq!(got, whole, "chunked at {cuts:?}");
            assert_eq!(p, pos);
            assert_eq!(hd, held);
        }

        // Restarting at any reported boundary reproduces the rest (a few of them, to bound time).
        for (i, g) in whole.iter().enumerate().step_by(1 + whole.len() / 8) {
            let (rest, p, hd) = split(s, input, g.next(), &[]);
            assert_eq!(rest.as_slice(), &whole[i + 1..], "restart at {:?}", g.next());
            assert_eq!(p, pos);
            assert_eq!(hd, held);
        }
    }
});
