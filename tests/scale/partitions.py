"""Command-line helpers of the shell-driven scale tests (Slurm):

    partitions.py split PIPELINE PARTS SEED OUT_DIR   # demo input → part-<k>.parquet
    partitions.py compare DIR_A DIR_B                 # outputs equal byte for byte?
"""

import sys
from pathlib import Path

import pyarrow.parquet as pq

from common import canonical, digest, pipeline_input, read_outputs, read_rejects, split


def main(argv):
    if argv[:1] == ["split"] and len(argv) == 5:
        _, pipeline, parts, seed, out = argv
        for p in split(pq.read_table(pipeline_input(pipeline)), int(parts), out, int(seed)):
            print(p)
        return 0
    if argv[:1] == ["compare"] and len(argv) == 3:
        a, b = read_outputs(argv[1]), read_outputs(argv[2])
        if sorted(a) != sorted(b):
            print(f"different partitions: {sorted(a)} vs {sorted(b)}")
            return 1
        ca, cb = canonical(a.values()), canonical(b.values())
        ra, rb = canonical(read_rejects(argv[1]).values()), canonical(read_rejects(argv[2]).values())
        rows = sum(t.num_rows for t in a.values())
        if ca != cb or ra != rb:
            print(f"DIFFERENT: outputs {digest(ca)} vs {digest(cb)}, rejects {digest(ra)} vs {digest(rb)}")
            return 1
        print(f"identical: {len(a)} partitions, {rows} rows, sorted output sha256 {digest(ca)}, rejects {digest(ra)}")
        return 0
    print(__doc__)
    return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
