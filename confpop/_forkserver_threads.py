"""Imported first among confpop's modules by the fork server of the local pools.

The fork server then imports the engines (xtb, tblite: OpenMP and BLAS runtimes that read
their thread count once, when they load) so that workers forked from it start with them
loaded; one thread each, as in every worker (see confpop.execution). Workers set their own
environment (the caller's, with ``OMP_NUM_THREADS=1``) in their initializer.

Ctrl-C in a terminal reaches the whole process group: the fork server (importing the
engines for a second or two) and its workers ignore it, so that it does not print their
tracebacks; the caller stops them (confpop.execution.terminate_pool).
"""

import os
import signal

os.environ["OMP_NUM_THREADS"] = "1"
signal.signal(signal.SIGINT, signal.SIG_IGN)  # inherited by the workers it forks
