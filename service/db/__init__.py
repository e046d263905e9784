"""The service's database: engine and timeouts, tables, migrations, repository."""
