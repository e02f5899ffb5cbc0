"""The I/O floor of a star-rating run, by a strong general-purpose library:
polars reads what the run reads (the id and the level-count columns) and
writes the table the run wrote (read first, untimed) with the same codec
(zstd), on all cores. Prints the two times and their sum: no star-rating
run can take less than reading and writing these bytes, whatever its fit
and posteriors cost.

usage: python3 benches/peer/star_io_floor.py INPUT.parquet ID COL,COL,... RUN_OUTPUT.parquet SCRATCH.parquet
"""
import sys
import time

import polars as pl


def main() -> None:
    input_path, id_column, counts, run_output, scratch = sys.argv[1:6]
    start = time.perf_counter()
    read = pl.read_parquet(input_path, columns=[id_column, *counts.split(",")])
    read_seconds = time.perf_counter() - start
    table = pl.read_parquet(run_output)
    start = time.perf_counter()
    table.write_parquet(scratch, compression="zstd")
    write_seconds = time.perf_counter() - start
    assert read.height == table.height, "the run's output has a row per input row"
    print(f"read\t{read_seconds:.2f}\twrite\t{write_seconds:.2f}\tfloor\t{read_seconds + write_seconds:.2f}")


if __name__ == "__main__":
    main()
