"""Alarms, in layer order: rule kinds (``kinds``: one module each, one registry), their evaluation
(``charts``, ``windows``, ``feeds``), the alarm records and their outbox events (``records``), and
above them the use cases (``service``), backtests (``backtest``) and the alarm job (``jobs``)."""
