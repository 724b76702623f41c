/** Public exports of src/risk. */
export {};
