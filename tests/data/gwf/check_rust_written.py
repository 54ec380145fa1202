"""Read rust_written.gwf (written by glitchbook's GwfWriter, test
`io_gwf::writer_output_is_the_committed_file_gwframe_read`) with gwframe and
compare every sample with what glitchbook's reader returns
(rust_written_expected.csv, written by the same test with
GLITCHBOOK_REGEN_GWF=1).

    pip install gwframe==0.8.4 numpy==2.4.6
    python3 tests/data/gwf/check_rust_written.py

Prints one line per channel and "N passed, N failed"; exit status 1 on any
difference.
"""
import csv
import os
import sys

import gwframe
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
PATH = os.path.join(HERE, "rust_written.gwf")
# The file's frames start at +0, +1 and +3 s (1 s each): the expected series
# has one second of NaN (no frame) before the third.
FRAME_SAMPLES = [(0, 64), (64, 128), (192, 256)]
# ADC channels: gwframe returns raw counts; glitchbook applies
# value = bias + slope x counts with the values the test wrote.
CALIBRATION = {"Z1:A_I16": (-3.0, 0.5)}


def main():
    expected = {}
    with open(os.path.join(HERE, "rust_written_expected.csv")) as fh:
        for row in csv.DictReader(fh):
            expected.setdefault(row["name"], []).append(float(row["value"]))
    passed = failed = 0
    for k, (a, b) in enumerate(FRAME_SAMPLES):
        # validate_checksum: the reference library checks the file checksum
        # (and it checks every structure checksum on each read).
        data = gwframe.read(PATH, None, frame_index=k, validate_checksum=(k == 0))
        for name, want in expected.items():
            got = data[name].array.astype(np.float64)
            if name in CALIBRATION:
                bias, slope = CALIBRATION[name]
                got = bias + slope * got
            ok = np.array_equal(got, np.array(want[a:b]), equal_nan=True)
            print(f"frame {k} {name} {data[name].array.dtype} {data[name].type} "
                  f"rate {data[name].sample_rate}: {'ok' if ok else 'DIFFERS'}")
            passed += ok
            failed += not ok
    print(f"{passed} passed, {failed} failed")
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
