"""The faces: the command line, the files an audit writes, the report and its prose, and the
chart builders the page and the report share. Each is a view of one ``AuditResult``."""
