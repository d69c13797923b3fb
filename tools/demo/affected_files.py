#!/usr/bin/python3
"""List the files of a POSIX ustar archive (the demo image) touched by unverified sectors.

Usage: affected_files.py DECODE_DIR [--json]

Reads DECODE_DIR/image.bin as a tar archive (Python's tarfile module, which knows where
each member's header and data lie) and DECODE_DIR/damage-map.json for the status of
every sector, and prints, per archive member, the unverified sectors that overlap its
header block or its data. A member whose header lies in an unverified sector may be
misnamed as well as damaged. Exit code 0 when nothing is touched, 4 when some file is
(the same meaning as salvor's exit code 4), 3 on unreadable input.
"""
import json
import sys
import tarfile


def main(argv):
    if len(argv) < 2 or argv[1] in ("-h", "--help"):
        print(__doc__.strip())
        return 0 if len(argv) >= 2 else 2
    folder = argv[1]
    as_json = "--json" in argv[2:]
    try:
        with open(f"{folder}/damage-map.json") as f:
            dmap = json.load(f)
    except (OSError, ValueError) as e:
        print(f"affected_files: {folder}/damage-map.json: {e}", file=sys.stderr)
        return 3
    sector_bytes = dmap["geometry"]["sector_bytes"]
    status = {s["lba"]: s["status"] for s in dmap["sectors"]}
    bad = {lba for lba, st in status.items() if st not in ("good", "corrected")}
    touched = []
    try:
        # ignore_zeros: keep going past a damaged block of zeros to later members.
        with tarfile.open(f"{folder}/image.bin", mode="r:", ignore_zeros=True) as tar:
            for m in tar:
                first = m.offset // sector_bytes
                last = (m.offset_data + max(m.size, 1) - 1) // sector_bytes
                hit = sorted(lba for lba in range(first, last + 1) if lba in bad)
                if hit:
                    touched.append({"file": m.name, "bytes": m.size,
                                    "unverified_sectors": hit,
                                    "statuses": sorted({status[l] for l in hit})})
    except (OSError, tarfile.TarError) as e:
        print(f"affected_files: {folder}/image.bin: cannot read as a tar archive: {e}",
              file=sys.stderr)
        return 3
    if as_json:
        print(json.dumps({"affected_files": touched}, indent=1))
    elif not touched:
        print("no file of the archive is touched by an unverified sector")
    else:
        print(f"{len(touched)} file(s) of the archive touched by unverified sectors:")
        width = max(len(t["file"]) for t in touched)
        for t in touched:
            lbas = t["unverified_sectors"]
            shown = ", ".join(str(x) for x in lbas[:6]) + (" ..." if len(lbas) > 6 else "")
            print(f"  {t['file']:<{width}}  {t['bytes']:>8} bytes  "
                  f"{len(lbas)} sector(s) {'/'.join(t['statuses'])}: lba {shown}")
    return 4 if touched else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
