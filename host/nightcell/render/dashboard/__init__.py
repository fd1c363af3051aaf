"""The class set's page: an aiohttp server over ``tasks.dashboard`` and the page's own files (``static/``)."""
