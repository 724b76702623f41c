/** Public exports of src/formats. */
export {};
