/** Public exports of src/graph. */
export {};
