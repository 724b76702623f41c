/** Public exports of src/scale. */
export {};
