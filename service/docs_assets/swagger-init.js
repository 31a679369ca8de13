// Starts Swagger UI from files this service serves itself (no CDN, no inline script).
"use strict";
window.addEventListener("DOMContentLoaded", () => {
  window.ui = SwaggerUIBundle({
    url: document.body.dataset.openapi,
    dom_id: "#swagger-ui",
    layout: "BaseLayout",
    deepLinking: true,
    showExtensions: true,
    showCommonExtensions: true,
    persistAuthorization: false,
    presets: [SwaggerUIBundle.presets.apis, SwaggerUIBundle.SwaggerUIStandalonePreset],
  });
});
