#!/usr/bin/python3
"""Search for tf1's 32-bit sync mark (and the 16-bit servo mark); run with /usr/bin/python3.

A sync mark follows the 2T preamble (channel bits 0101..., ending in 1) and is followed by
the 8/9-coded header. The search maximises, in this order:
  1. d_pre: the minimum Hamming distance between the mark and every misaligned 32-bit
     window that overlaps the preamble (shift 1..32) or lies inside it (both phases);
  2. d_hdr: the same over the windows shifted 1..16 bits into the header, minimised over
     every possible header (any bytes, each one 8/9 codeword); at larger shifts the window
     is mostly header bits and some header comes close to any mark (the full profile is
     printed), which is why the parser keeps the best hit within one mark length;
  3. low peak aperiodic autocorrelation sidelobe (marks as +/-1);
subject to: zero runs <= 4 overall and in each interleave, <= 2 trailing zeros overall and
per interleave (so mark + header keeps the (0,4/4) constraint).
Deterministic (fixed seed). Prints the best marks with their figures.

Usage: /usr/bin/python3 tools/format/find_sync.py [--servo] [--samples N]
"""
import argparse
import itertools
import random


def codebook():
    def stats(bits):
        longest = run = 0
        for b in bits:
            run = run + 1 if b == 0 else 0
            longest = max(longest, run)
        lead = next((i for i, b in enumerate(bits) if b), len(bits))
        trail = next((i for i, b in enumerate(reversed(bits)) if b), len(bits))
        return longest, lead, trail
    words = []
    for w in range(512):
        bits = [(w >> (8 - t)) & 1 for t in range(9)]
        if all(m <= 4 and l <= 2 and t <= 2 for m, l, t in (stats(bits), stats(bits[0::2]), stats(bits[1::2]))):
            words.append(bits)
    return words[:256]


def zero_runs_ok(bits, trailing_max):
    for seq in (bits, bits[0::2], bits[1::2]):
        run = longest = 0
        for b in seq:
            run = run + 1 if b == 0 else 0
            longest = max(longest, run)
        if longest > 4 or run > trailing_max:
            return False
    return True


def hamming(a, b):
    return sum(x != y for x, y in zip(a, b))


def sidelobe(bits):
    s = [1 if b else -1 for b in bits]
    n = len(s)
    return max(abs(sum(s[i] * s[i + k] for i in range(n - k))) for k in range(1, n))


def d_before(mark, pattern, lead_len):
    """min distance to windows overlapping or inside the repeating lead field before the mark."""
    n = len(mark)
    lead = [pattern[i % len(pattern)] for i in range(lead_len)]
    stream = lead + mark
    best = n
    for start in range(0, lead_len):
        best = min(best, hamming(stream[start:start + n], mark))
    return best


def d_after(mark, words, max_shift):
    """min distance to windows shifted k = 1..max_shift bits into the coded field after the mark,
    over every possible byte sequence (bytes are independent, so blocks minimise separately)."""
    n = len(mark)
    profile = []
    for k in range(1, max_shift + 1):
        d = hamming(mark[k:], mark[:n - k])
        target = mark[n - k:]          # compared with the first k coded bits
        for blk in range(0, k, 9):
            part = target[blk:blk + 9]
            d += min(hamming(w[:len(part)], part) for w in words)
        profile.append(d)
    return profile


def search(n, pattern, lead_len, samples, seed, keep):
    words = codebook()
    rng = random.Random(seed)
    results = {}
    for _ in range(samples):
        bits = [rng.randint(0, 1) for _ in range(n)]
        # hill-climb on single-bit flips
        def score(b):
            if not zero_runs_ok(b, 2):
                return None
            dp = d_before(b, pattern, lead_len)
            return (dp, -sidelobe(b))
        cur = score(bits)
        improved = True
        while improved:
            improved = False
            for i in range(n):
                cand = bits[:]
                cand[i] ^= 1
                s = score(cand)
                if s is not None and (cur is None or s > cur):
                    bits, cur, improved = cand, s, True
        if cur is None:
            continue
        key = "".join(map(str, bits))
        if key not in results:
            prof = d_after(bits, words, n - 1)
            results[key] = (cur[0], min(prof[: n // 2]), -cur[1], prof)
    ranked = sorted(results.items(), key=lambda kv: (-kv[1][0], -kv[1][1], kv[1][2]))
    return ranked[:keep]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--servo", action="store_true", help="16-bit servo mark after a 3T preamble")
    ap.add_argument("--samples", type=int, default=400)
    args = ap.parse_args()
    if args.servo:
        ranked = search(16, [0, 0, 1], 96, args.samples, 2, 5)
    else:
        ranked = search(32, [0, 1], 128, args.samples, 1, 5)
    for key, (dp, dh, sl, prof) in ranked:
        print(f"{key}  hex {int(key, 2):0{len(key)//4}X}  d_pre {dp}  d_hdr(1..{len(key)//2}) {dh}  sidelobe {sl}")
        print("   d_hdr by shift 1..: " + " ".join(map(str, prof)))


if __name__ == "__main__":
    main()
