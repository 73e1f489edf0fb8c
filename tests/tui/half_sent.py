"""A stand-in measurement that is stopped while it sends its result, for
``test_measure_jobs``: run in a worker process of ``tui.parallel``, it starts a result
message on the pool's results pipe, sends a few bytes of it, and waits there for ever,
as a worker does when ctrl+c stops it in the middle of sending a large measurement.

Run as a script, it measures one photo with it in parallel, presses ctrl+c once the
pool's thread waits for the rest of the message, and prints ``interrupted``.
"""

from __future__ import annotations

import os
import signal
import struct
import sys
import threading
import time


def half_sent(photo, settings):
    # the executor's worker loop (concurrent.futures.process._process_worker) called us
    # with its results queue in hand
    results = sys._getframe(1).f_locals.get("result_queue")
    if results is None:
        raise RuntimeError("the worker's results queue was not found: the test cannot run")
    # a message of 1 MB announced (multiprocessing.connection's length header), 16 bytes of it
    os.write(results._writer.fileno(), struct.pack("!i", 1 << 20) + b"\0" * 16)
    time.sleep(3600)


def _waiting_for_the_rest() -> bool:
    """Is a thread of this process inside a connection's ``_recv``?"""
    frames = sys._current_frames()
    return any(f.f_code.co_name == "_recv" for tid, f in frames.items()
               if tid != threading.get_ident())


def main() -> int:
    import flatsight.tui.parallel as parallel

    parallel._measure_one = half_sent  # the name the pool submits, looked up as it does

    def press_ctrl_c() -> None:
        deadline = time.monotonic() + 120
        while not _waiting_for_the_rest():
            if time.monotonic() > deadline:
                print("the pool never waited for a result", flush=True)
                os._exit(3)
            time.sleep(0.01)
        print("waiting for the rest", flush=True)
        os.kill(os.getpid(), signal.SIGINT)

    threading.Thread(target=press_ctrl_c, daemon=True).start()
    try:
        for finished in parallel.measure_in_parallel([("BW-FL-0700.png", None)], 1):
            print("finished", finished.outcome, flush=True)
    except KeyboardInterrupt:
        print("interrupted", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
