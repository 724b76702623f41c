import type { RegisterCommand } from "./commands.js";

/** `headroom compare` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
