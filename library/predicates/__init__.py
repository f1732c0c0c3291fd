"""Predicate language for starts_when / stops_when: whitelisted parse, numpy, SMT and text back-ends."""
