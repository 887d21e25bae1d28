"""``wallstress serve``: a local web page for people who do not use a command line.

The page runs the same jobs as the command line (:mod:`wallstress.jobs`): no second pipeline and
no formula here. :mod:`.runs` keeps each upload's job in its own private folder, :mod:`.summary`
turns a finished job into what the page shows, :mod:`.app` is the Starlette application (routes,
security headers, CSRF, upload limit) and :mod:`.server` starts it under uvicorn. Templates and
static files are bundled; the page loads nothing from the network.
"""
