"""gunicorn settings for certimatch.

Use: ``gunicorn -c deploy/gunicorn.conf.py 'service.app:create_app()'``.

Solving is CPU-bound numpy/OR-Tools work, so one synchronous worker per core is the right
shape: threads would only contend for the same core, and a slow solve must not block
other requests of the same worker's queue longer than needed.
"""

import multiprocessing
import os

# Loopback unless told otherwise: the service has no authentication of its own yet.
bind = os.environ.get("CERTIMATCH_BIND", "127.0.0.1:8080")
workers = int(os.environ.get("CERTIMATCH_WORKERS", multiprocessing.cpu_count()))
worker_class = "sync"
# A large problem may take tens of seconds end to end; past this the worker is restarted.
timeout = int(os.environ.get("CERTIMATCH_WORKER_TIMEOUT", "120"))
# On SIGTERM, let requests in flight finish for this long before exiting.
graceful_timeout = 30
keepalive = 5
# Recycle workers now and then so that memory of one huge request does not linger.
max_requests = 1000
max_requests_jitter = 100
# gunicorn >= 25 opens a control socket at one path per user; several servers on one
# machine (tests, a demo, a dev server) would delete each other's. We do not use it.
control_socket_disable = True
accesslog = "-"
errorlog = "-"
