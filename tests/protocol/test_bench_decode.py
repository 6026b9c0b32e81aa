"""Smoke test of ``taprig bench decode --quick``: it runs, checks its three decoders agree, and reports ratios.
No figure is asserted: speed is the benchmark's business, not a test's."""

from __future__ import annotations

from taprig.bench import bench_decode


def test_quick_run_reports_every_figure_with_its_baseline():
    records = bench_decode.run(quick=True)
    by_unit = {}
    for record in records:
        by_unit.setdefault(record.unit, []).append(record)
        assert record.value > 0
        if record.baseline is not None:
            assert record.ratio == record.value / record.baseline
    assert len(by_unit["channel-samples/s"]) == 2 and by_unit["channel-samples/s"][0].target
    assert {"MB/s", "channel-samples/s"} == set(by_unit)
