"""The planner (issue 13): the closed-form model over ranges of conditions around a planned or stored shot.

``answers`` resolves a base (a shot, or a stored shot by campaign and id) and the settings that apply,
asks ``model.plan`` the four questions (scan, nominal windows, nearest nominal shot, sensitivities)
and gives the API's answers; ``figures`` draws a scan (the status map of two axes, the curves of one);
``page`` gives the planner page its start and the text of its panels; ``files`` writes
``wakeledger plan``'s CSV, Parquet, JSON and HTML files. Nothing is stored.
"""
