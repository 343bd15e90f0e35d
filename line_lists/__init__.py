"""Reference line lists shipped with wavecal (ECSV tables, one per element)."""
