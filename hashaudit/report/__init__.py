"""Renderers: turn an ``AuditResult`` into JSON, a terminal table, Markdown, JUnit XML or HTML. They compute nothing."""
