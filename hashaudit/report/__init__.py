"""Renderers: turn an ``AuditResult`` into JSON or a terminal table. They compute nothing."""
