import type { RegisterCommand } from "./commands.js";

/** `headroom round` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
