import type { RegisterCommand } from "./commands.js";

/** `headroom simulate` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
