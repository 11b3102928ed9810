"""The engine releases the GIL: a Python thread keeps running while a probe computes."""

import threading
import time

import voxstrata
from conftest import load_capture


def test_other_threads_run_during_a_probe(demo_early):
    layers, cols = load_capture(demo_early)
    done = threading.Event()
    took = []

    def work():
        t = time.perf_counter()
        voxstrata.probe(layers, {"phone": cols["phone"]}, cols["speaker"], utterances=cols["utterance"],
                        layers="0-2", max_train_frames=4000, bootstrap=100)
        took.append(time.perf_counter() - t)
        done.set()

    worker = threading.Thread(target=work)
    ticks = []
    worker.start()
    while not done.is_set():
        ticks.append(time.perf_counter())
        time.sleep(0.01)
    worker.join()
    gaps = [b - a for a, b in zip(ticks, ticks[1:])]
    # Held for the whole call, the GIL would stop this loop for about the call's length.
    assert took[0] > 0.5 and len(ticks) > 10
    assert max(gaps) < 0.5 * took[0], (max(gaps), took[0])
