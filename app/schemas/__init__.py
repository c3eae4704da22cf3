"""Pydantic request and response schemas, named on one ladder: XCreate, XRead, XPage."""
