"""The analysts' dashboard: server-rendered pages under /ui over the same operations as the API."""
