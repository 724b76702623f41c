/** Public exports of src/spec. */
export {};
