"""Run the pyzdcf 1.0.3 test oracle on two light curves and print its table as CSV.

Run with the interpreter of the separate oracle venv (tests/oracles/make_zdcf_env.sh),
never the project's: pyzdcf needs numpy < 2.

    .zdcf-venv/bin/python tests/oracles/run_pyzdcf.py DIR [MINPTS]

DIR holds lc1.csv and lc2.csv (headerless t,flux,err); curve 2 lags curve 1 at
positive tau.  Output columns: tau,-sig(tau),+sig(tau),dcf,-err(dcf),+err(dcf),#bin.
The call is the one of REFERENCES §5 (num_MC = 0: deterministic, no Monte Carlo).
"""

import os
import sys
import tempfile

from pyzdcf import pyzdcf


def main() -> None:
    directory = os.path.abspath(sys.argv[1])
    minpts = int(sys.argv[2]) if len(sys.argv) > 2 else 0
    with tempfile.TemporaryDirectory() as out:  # pyzdcf writes a .dcf file there
        table = pyzdcf(
            directory + "/",
            out + "/",
            intr=False,
            verbose=False,
            sep=",",
            parameters=dict(
                autocf=False,
                prefix="ccf",
                uniform_sampling=False,
                omit_zero_lags=True,
                minpts=minpts,
                num_MC=0,
                lc1_name="lc1.csv",
                lc2_name="lc2.csv",
            ),
        )
    sys.stdout.write(table.to_csv(index=False, float_format="%.17g"))


if __name__ == "__main__":
    main()
