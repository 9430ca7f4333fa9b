"""The bridge from requests to :mod:`priors`: limits and cost estimates (``limits``),
fits and forecasts (``engine``), planning answers (``planning``) and the
exponential-smoothing benchmark (``ets``). Shared by the HTTP API, the jobs and the CLI."""
