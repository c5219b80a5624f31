"""The bridge from stored inventories and evidence to engine objects, cached per process."""
