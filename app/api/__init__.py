"""HTTP layer: thin routes over the services, one problem-document error shape."""
