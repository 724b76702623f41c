/** Public exports of src/simulate. */
export {};
