"""Invented demo campaign: deterministic shot generator and loader (``wakeledger demo``).

- ``seed_demo.scenario``: the fictional facility (the Quillmarsh Proton Test Line), the
  fixed calendar (ISO weeks 2026-W46..2026-W48 in America/Anchorage; the last week,
  2026-W48, is the demo's "current week"), the shift plan, the invented machine values.
- ``seed_demo.generator``: ``generate_demo_shots(seed=DEMO_SEED)`` -> list of shot bodies
  (API JSON shape, time order); ``demo_campaign_spec()`` -> the campaign's fields.
- ``seed_demo.loader``: ``load_demo_campaign(session_factory)`` creates the campaign with
  the campaign service and ingests the shots with the ingest service in batches;
  ``prepare_demo(path, settings)`` is what ``wakeledger demo`` runs before serving.

The same seed gives the same payloads with the same numpy version (numpy does not
promise identical random streams across its versions).
"""
