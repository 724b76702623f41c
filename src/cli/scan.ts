import type { RegisterCommand } from "./commands.js";

/** `headroom scan` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
