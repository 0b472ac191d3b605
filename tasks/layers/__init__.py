"""The SQL layers: staging -> intermediate -> features built from warehouse/sql, per bucket or whole; the business calendar."""
