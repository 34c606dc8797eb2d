"""``benchwright serve``: a local, read-only web view over the results store.

``app.create_app`` builds the Starlette application (routes, token gate, live streams); ``pages``
renders the pages from the store; ``live`` computes what the live view shows of a running run;
``settings`` holds the frozen settings and the loopback rule.  Needs the ``web`` extra.
"""
