import type { RegisterCommand } from "./commands.js";

/** `headroom report` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
