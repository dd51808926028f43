"""Imported first by the run processes' forkserver: one torch thread before anything else.

Importing this module is its whole job (multiprocessing's forkserver can only import): it
sets torch's intra-op threads to one in the server, so no thread pool exists when run
processes are forked from it; each run then sets its own ``torch_threads``.
"""

from __future__ import annotations

import torch

torch.set_num_threads(1)
