/** Public exports of src/report. */
export {};
