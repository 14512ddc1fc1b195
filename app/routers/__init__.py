"""HTTP routers: parse the request, call a service, answer."""
