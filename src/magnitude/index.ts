/** Public exports of src/magnitude. */
export {};
