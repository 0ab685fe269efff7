"""Presentation of the evaluation's results: tables rendered as Markdown (``markdown``), HTML (``html``,
template in ``templates/``) and figures (``figures``, ``diagnose_figures``)."""
