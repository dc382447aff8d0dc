// Placeholder so the build has an entry; the worker pool's entry point is written separately.
export {};
