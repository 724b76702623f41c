/** Public exports of src/measure. */
export {};
