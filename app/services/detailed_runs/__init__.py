"""Detailed envelope runs of stored shots: the job's life (``lifecycle``), its charts and
key numbers (``figures``) and the self-contained HTML file of ``wakeledger simulate`` (``file``)."""
