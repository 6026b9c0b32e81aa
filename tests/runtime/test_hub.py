"""The hub: latest-wins fan-out, bounded history, a slow subscriber never blocks the publisher."""

import threading

from taprig.runtime.hub import Hub


def test_latest_wins_and_counts_missed():
    hub = Hub(history_len=5)
    sub = hub.subscribe()
    for i in range(10):
        hub.publish(i)
    assert sub.get(timeout=1) == 9
    assert sub.missed == 9
    assert sub.get(timeout=0.01) is None  # nothing new
    assert hub.snapshot() == [5, 6, 7, 8, 9] and hub.latest == 9 and hub.published == 10


def test_slow_subscriber_does_not_block_publisher():
    hub = Hub(history_len=100)
    slow = hub.subscribe()  # never reads
    fast = hub.subscribe()
    seen = []
    done = threading.Event()

    def reader():
        while not done.is_set():
            v = fast.get(timeout=0.5)
            if v is not None:
                seen.append(v)
                if v == 9999:
                    done.set()

    t = threading.Thread(target=reader)
    t.start()
    for i in range(10000):
        hub.publish(i)
    assert done.wait(5)
    t.join(5)
    assert seen[-1] == 9999 and seen == sorted(seen)
    assert slow.get(timeout=0) == 9999  # the slow one only ever holds the newest value
    assert len(hub.history) == 100


def test_close_wakes_waiters_and_unsubscribe():
    hub = Hub()
    sub = hub.subscribe()
    result = []
    t = threading.Thread(target=lambda: result.append(sub.get(timeout=10)))
    t.start()
    hub.close()
    t.join(5)
    assert not t.is_alive() and result == [None]
    sub.close()
    assert hub.subscriber_count == 0


def test_history_keeps_summaries_not_whole_values():
    # A producer may publish megabytes per value; the trend history must hold only what summarize returns.
    hub = Hub(history_len=3, summarize=lambda value: len(value))
    for n in (10, 20, 30, 40):
        hub.publish(b"x" * n)
    assert hub.snapshot() == [20, 30, 40] and hub.latest == b"x" * 40
