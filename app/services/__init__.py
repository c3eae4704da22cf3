"""Services: each public function owns its transaction (``db.transaction()``), takes keyword
arguments, and returns schemas or plain values. Services raise ``app.errors`` exceptions and
never build HTTP responses."""
