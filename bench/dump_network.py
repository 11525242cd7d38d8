"""Write workload (c) cases for the Rust profiling driver
`rust/core/examples/network_batch.rs`:

    python -m bench.dump_network REACTIONS CASES FILE
"""

from __future__ import annotations

import sys

import numpy as np

from bench import workloads


def main(argv: list[str]) -> int:
    n_reactions, n, path = int(argv[0]), int(argv[1]), argv[2]
    p = workloads.random_network(n, n_reactions)
    r, s = p.nu.shape
    header = np.array([r, s, n], dtype=np.float64)
    parts = [header, p.nu, p.feed, p.lnK, p.P]
    np.concatenate([np.ascontiguousarray(a, dtype="<f8").reshape(-1) for a in parts]).tofile(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
