/* Home page: next season's plan from a plan's recipe. */
(function () {
  "use strict";
  var FP = window.FP;
  document.querySelectorAll("form.fp-dup-form").forEach(function (form) {
    form.addEventListener("submit", function (e) {
      e.preventDefault();
      var plan = form.getAttribute("data-plan");
      var msg = form.querySelector(".fp-dup-msg");
      var body = FP.formJSON(form);
      msg.textContent = "Planning\u2026";
      FP.api("POST", "/api/plans/" + encodeURIComponent(plan) + "/duplicate", body).then(function (job) {
        return FP.waitJob(job.job);
      }).then(function (res) {
        window.location.assign(res.url);
      }).catch(function (err) { msg.textContent = err.message; msg.className = "fp-dup-msg fp-fail"; });
    });
  });
})();
