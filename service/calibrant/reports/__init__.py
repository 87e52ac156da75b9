"""Governance reports: a model's monitoring against its plan, rebuilt as the service knew it at ``as_of``.

``build`` assembles the report's data (JSON), ``snapshots`` stores it with its content hash,
``html`` and ``pdf`` render the same data with the charts of ``charts``; ``plans`` holds the
versioned monitoring-plan use cases. Numbers come from ``rollup.query.period_metrics`` and
``rollup.metrics_service`` over summaries built from the raw rows known at ``as_of``.
"""
