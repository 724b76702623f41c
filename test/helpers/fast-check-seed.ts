// Property tests run with a fixed seed so CI is repeatable; set FC_SEED to explore other seeds locally.
import * as fc from "fast-check";

fc.configureGlobal({ seed: Number(process.env["FC_SEED"] ?? 20261201) });
