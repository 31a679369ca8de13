// Starts ReDoc from files this service serves itself (no CDN, no web fonts, no inline script).
"use strict";
window.addEventListener("DOMContentLoaded", () => {
  Redoc.init(document.body.dataset.openapi, { hideDownloadButton: false }, document.getElementById("redoc"));
});
