/** Public exports of src/numeric. */
export {};
