"""Scheduled work as plain functions: tests call them directly with an injected clock;
the app's scheduler only decides when (see service/scheduler.py)."""
