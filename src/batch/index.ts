/** Public exports of src/batch. */
export {};
