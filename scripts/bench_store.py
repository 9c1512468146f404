"""Cost of the run directory's checks: point files written with page checksums and read
back completely with checksum verification (the check at every run start), against a
plain Parquet write and a schema-only read (the baseline, measured in the same run);
checkpoints with two generations against a single write; the size of a final state.

    python scripts/bench_store.py            # L = 64, bond 64, 200 output times
    python scripts/bench_store.py --quick    # L = 32, bond 32, 50 output times
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from mpsobs.pipeline import spec, store
from mpsobs.pipeline.columns import EXTRA, REQUIRED


def _best(func, repeat: int = 5) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def _frame(point: spec.Point, rows: int) -> pd.DataFrame:
    """Every result column as floats (the cost of a point file depends on its size)."""
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({name: rng.random(rows) for name in (*REQUIRED, *EXTRA)})
    return frame.assign(**point.columns)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    L, chi, n_times = (32, 32, 50) if args.quick else (64, 64, 200)
    run = spec.parse({"name": "bench", "model": {"name": "xxz", "L": L},
                      "state": {"kind": "neel"},
                      "times": {"t_max": float(n_times - 1), "n_times": n_times},
                      "coarse": [{"observable": "number", "block": 2}]})
    (point,) = run.points
    frame = _frame(point, 2 * n_times)
    rng = np.random.default_rng(1)
    tensors = [rng.normal(size=(min(chi, 2 ** min(i, L - i)), 2,
                                min(chi, 2 ** min(i + 1, L - i - 1)))) + 0j
               for i in range(L)]
    with tempfile.TemporaryDirectory() as tmp:
        st = store.RunStore(tmp)
        plain = Path(tmp) / "plain.parquet"
        table = pa.Table.from_pandas(frame, preserve_index=False)
        base_write = _best(lambda: pq.write_table(table, plain))
        write = _best(lambda: st.write_point(point, frame))
        base_read = _best(lambda: pq.read_schema(plain))
        verify = _best(lambda: st.verify_point(point.point_id))
        single = _best(lambda: store._write_npz(Path(tmp) / "one.npz", [tensors], {}))
        generations = _best(lambda: st.save_checkpoint(point.point_id, [tensors], {}))
        load = _best(lambda: st.load_checkpoint(point.point_id))
        size = os.path.getsize(st.checkpoint_path(point.point_id))
    print(f"mpsobs store benchmark: L = {L}, bond {chi}, {len(frame)} rows per point "
          f"({time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, "
          f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.2f})")
    print(f"point file (atomic, fsync, meta): {write * 1e3:8.2f} ms  "
          f"({write / base_write:5.2f} x plain pq.write_table {base_write * 1e3:.2f} ms)")
    print(f"point file full verified read   : {verify * 1e3:8.2f} ms  "
          f"({verify / base_read:5.2f} x schema-only read {base_read * 1e3:.2f} ms)")
    print(f"checkpoint, two generations     : {generations * 1e3:8.2f} ms  "
          f"({generations / single:5.2f} x single write {single * 1e3:.2f} ms)")
    print(f"checkpoint load with CRC checks : {load * 1e3:8.2f} ms")
    print(f"final state / checkpoint size   : {size / 2**20:8.2f} MiB (one state)")


if __name__ == "__main__":
    main()
