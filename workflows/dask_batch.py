"""Drive a stobuilder batch on a Dask cluster from Python.

    python workflows/dask_batch.py STRUCTURES_FOLDER OUT_DIR [tcp://scheduler:8786]

Without a scheduler address the script starts a LocalCluster on this machine (loopback only) and
shuts it down at the end. The batch itself is the same as ``stobuilder batch ... --scheduler``:
the cluster's workers read the structures and make the texts (they need to see the input
paths), this process writes the files and the manifest. Re-running resumes.
Needs dask.distributed: pip install 'stobuilder[cluster]'.
"""

import sys

from distributed import Client, LocalCluster

from stobuilder.batch import discover, run_batch
from stobuilder.jobs import make_progress
from stobuilder.pipeline.options import BuildOptions


def main(argv: list[str]) -> int:
    if len(argv) not in (2, 3):
        print(__doc__, file=sys.stderr)
        return 2
    structures, out_dir = argv[0], argv[1]
    options = BuildOptions(rule="slater", gaussians=3, codes=("nwchem", "gaussian"), check=True)
    items = discover([structures], exclude=out_dir)
    cluster = None
    if len(argv) == 3:
        client = Client(argv[2])
    else:
        cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address=None)
        client = Client(cluster)
    try:
        summary = run_batch(items, options, out_dir, executor=client.get_executor(pure=False),
                            progress=make_progress(len(items)))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    for path, error in summary.failures:
        print(f"failed: {error}")
    print(f"{summary.done} done, {summary.skipped} skipped, {summary.failed} failed; manifest {summary.manifest}")
    return summary.exit_status


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
