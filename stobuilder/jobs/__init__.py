"""The generic job engine under ``batch`` and ``bench``: tasks run on a process pool or a Dask
cluster, one manifest record per finished task, progress on stderr.

    manifest   Manifest (locked JSON lines), read_manifest, the record layouts' tests, prepare_out_dir
    progress   make_progress: a tqdm bar, plain lines, or nothing
    executors  run_tasks on our spawn pool or any concurrent.futures Executor; dask_executor

It knows nothing of structures or bases: the caller brings the worker function, its tasks, the
record layout and the manifest's name.
"""

from stobuilder.jobs.executors import check_scheduler_address, dask_executor, run_tasks, worker_count
from stobuilder.jobs.manifest import Manifest, prepare_out_dir, read_manifest
from stobuilder.jobs.progress import PROGRESS_MODES, make_progress

__all__ = [
    "Manifest",
    "PROGRESS_MODES",
    "check_scheduler_address",
    "dask_executor",
    "make_progress",
    "prepare_out_dir",
    "read_manifest",
    "run_tasks",
    "worker_count",
]
