"""The demo: the truth simulator of the invented demo cell C48, its scenario (a courier co-operative's
cargo tricycles), and the demo workflow behind ``socfuse demo``.  Kept out of :mod:`socfuse.models`,
which describes any cell."""
