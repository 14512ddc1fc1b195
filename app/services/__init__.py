"""Services: the decisions between routers and the store."""
