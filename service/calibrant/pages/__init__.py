"""Read-only pages for people: the models, a model's figures over time, an alarm's evidence.

Beside the API on the same floor (it imports neither the API nor is imported by it):
``calibrant.app.create_app`` includes ``router.build_router(PageHost(...))``. Templates
(Jinja2) and static files ship inside the package; the plotting library's script is served
from the installed ``plotly`` package, so the pages work with no network beyond this host.
"""
