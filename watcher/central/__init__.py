"""The central store: every daemon also publishes its judged runs, alert changes and delivered
messages to one PostgreSQL database, and the facility's views read all instruments from there.

The local SQLite store stays each daemon's own durable state. ``queue`` fills a queue table in
it inside the daemon's own transactions; ``publish`` empties it into PostgreSQL on a thread of its
own (``schema`` creates and migrates the central tables); ``reader`` is the read side for
``status``, ``digest`` and a page server. Nothing here is on the path from a run to its alert.
"""
