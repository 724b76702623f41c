/**
 * headroom's public library API. Re-exports only; every export is documented where it is defined.
 */
export {};
